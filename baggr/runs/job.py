"""The training job of a run directory: it reads the data, resumes from the checkpoint, trains,
checkpoints, stops on a signal, a stop request or a settled curve, and saves the model.

Members are pure functions of (seed, m), so a job killed at any moment resumes from its last
checkpoint and ends bit-identical to one never interrupted.
"""
from __future__ import annotations

import os
import signal
import socket
from dataclasses import dataclass
from pathlib import Path


from baggr.version import __version__
from baggr.config import Config
from baggr.errors import BaggrError, ClusterLostError, ModelFileError
from baggr.runs.checkpoint import FAULT_KILL, Checkpointer, fault_kill, remove_checkpoint
from baggr.runs.files import CHECKPOINT, JOURNAL, MODEL, STOP, DiskFullError, write_error
from baggr.runs.journal_writer import JournalWriter
from baggr.runs.rundir import RunDir, RunSettings, check_data, table_options



def stable_now(needed, m: int, settings: RunSettings, measure: str = "") -> str | None:
    """Why the run may stop after m members (None if not): it has reached members_needed, and the
    estimate of members_needed has itself settled.

    needed: [member, members_needed (-1: beyond reach)] of each refit of the estimated curve of the
    run's measure (one per doubling of the members, from 32; the error's for the error and the MSE,
    and for a measure without an estimate, the AUC of three or more classes). Rule: take the refits at or after stable_min_members
    members; the last stable_refits of them all give a members_needed within
    +-max(stable_spread N, stable_slack) of the latest one, N; and m >= N. So the run stops at N
    members when the estimate has settled by then, or as soon as it settles when N lies behind.
    """
    rows = [(int(a), int(b)) for a, b in needed if int(a) >= settings.stable_min_members and int(a) <= m]
    if len(rows) < settings.stable_refits:
        return None
    last = rows[-settings.stable_refits:]
    n = last[-1][1]
    room = max(settings.stable_spread * n, settings.stable_slack)
    if n < 1 or any(b < 1 or abs(b - n) > room for _, b in last) or m < n:
        return None
    at = ", ".join(str(a) for a, _ in last)
    what = "error" if measure in ("", "error", "mse") else measure
    return (f"stable: {n} members needed to come near the {what} limit (the estimate agreed within "
            f"{room:.0f} members at the refits after {at} members)")


@dataclass
class Outcome:
    """How a job ended."""

    status: str          # finished | stopped | failed
    reason: str
    member: int
    elapsed: float
    message: str         # one line for the user

    @property
    def code(self) -> int:
        return 0 if self.status in ("finished", "stopped") else 2


class Job:
    """The training job of one run directory: reads its data, resumes from a checkpoint, trains, saves.

    progress: an object with begin(start_fields), member(fields), note(text), end(outcome) and close().
    verify: check the data file's SHA-256 against config.json before reading it.
    cluster: grow the members on a Dask cluster (a scheduler's address or local:N); None: local threads.
    """

    SIGNALS = ("SIGINT", "SIGTERM", "SIGHUP")

    def __init__(self, rd: RunDir, progress=None, *, verify: bool = True, cluster: str | None = None):
        self.rd, self.progress, self.verify, self.cluster = rd, progress, verify, cluster
        self.backend = None          # the cluster's backend, connected before the data is read
        self.started = False         # the start line was written
        self.stop_reason = None
        self.saving = False
        self.journal = None
        self.training = None
        self.checkpointer = None
        self.cfg = None
        self.settings = None
        self._lock = None
        self._resumed = False
        self._old_handlers = {}

    # -- signals
    def _on_signal(self, signum, frame):
        name = signal.Signals(signum).name
        if self.stop_reason is None:
            self.stop_reason = name
            self._note(f"{name}: stopping after the member in hand (send it again to quit at once)")
        elif not self.saving:
            raise KeyboardInterrupt(name)

    def _install_signals(self) -> None:
        for name in self.SIGNALS:
            sig = getattr(signal, name, None)
            if sig is not None:
                try:
                    self._old_handlers[sig] = signal.signal(sig, self._on_signal)
                except ValueError:   # not the main thread (e.g. a test calling run() in a thread)
                    pass

    def _restore_signals(self) -> None:
        for sig, h in self._old_handlers.items():
            try:
                signal.signal(sig, h)
            except (ValueError, TypeError):
                pass
        self._old_handlers.clear()

    def _note(self, text: str) -> None:
        if self.progress is not None:
            self.progress.note(text)

    # -- the run
    def run(self) -> Outcome:
        """Train to the end (or a stop); BaggrError for what the user can fix (after an end line "failed")."""
        self.acquire()
        self._install_signals()
        try:
            return self.guarded(self._run)
        finally:
            if self.backend is not None:
                self.backend.shutdown()
            self._restore_signals()
            self.release()

    def acquire(self) -> None:
        """Take the run directory's lock and open its journal (ending a torn last line first)."""
        self._lock = self.rd.acquire()
        try:
            _terminate_torn_line(self.rd / JOURNAL)
            self.journal = JournalWriter(self.rd / JOURNAL)
        except OSError as e:
            self._lock.release()
            self._lock = None
            raise write_error("the journal", self.rd / JOURNAL, e) from None

    def release(self) -> None:
        if self.journal is not None:
            self.journal.close()
        if self._lock is not None:
            self._lock.release()
            self._lock = None

    def guarded(self, step):
        """step() with the job's handling of what ends it: a second signal quits, a user error or an
        internal one writes the end line "failed" and is raised again."""
        try:
            return step()
        except KeyboardInterrupt as e:
            return self._quit(str(e) or "SIGINT")
        except BaggrError as e:
            self._end("failed", f"error: {e}")
            raise
        except OSError as e:   # a full or read-only disk under the run directory: the user's to fix
            err = write_error("files in", self.rd.path, e)
            self._end("failed", f"error: {err}")
            raise err from None
        except Exception as e:
            self._end("failed", f"internal error: {type(e).__name__}: {e}")
            raise

    def _run(self) -> Outcome:
        done = self.open()
        if done is not None:
            return done
        if self.stop_reason:
            return self._stopped(self.training, write_checkpoint=False)
        self.begin()
        self.advance(self.training.config.members)
        return self.conclude()

    def open(self, prepared=None) -> Outcome | None:
        """Read the settings and the data (or take `prepared`: a function of the Config giving the
        data already read and binned for these settings), make the Training and restore the
        checkpoint; an Outcome when the run is finished already."""
        rd = self.rd
        cfg = self.cfg = rd.read_config()
        config = Config.from_dict(cfg["config"])
        self.settings = RunSettings.from_dict(cfg.get("run"))
        info = cfg["data"]
        st, _ = rd.state()
        self._resumed = st.starts > 0
        # a finished run asked for more members (resume --members N) grows on from its model
        grow = st.status == "finished" and (rd / MODEL).exists() and config.members > st.members
        if st.status == "finished" and (rd / MODEL).exists() and not grow:
            remove_checkpoint(rd)   # a crash may have left them after the end line
            return Outcome("finished", st.reason or "finished", st.members, st.elapsed,
                           f"{rd.path} is finished ({st.members} members); nothing to resume")
        if self.cluster is not None and self.backend is None:   # before the data: a wrong address is told at once
            from baggr.backends.dask import Dask
            self.backend = Dask(self.cluster, on_note=self._cluster_note)
        if self.verify:
            check_data(info)
        try:
            (rd / STOP).unlink()     # a stop request from an earlier job is not meant for this one
        except FileNotFoundError:
            pass
        table = table_options(cfg)
        from baggr.engine import Training, compile_seconds, missing_target_text
        if grow:
            from baggr.data.table import read_table
            X, y = read_table(info["path"], cfg["target"], drop=table["drop"], only=table["only"],
                              delimiter=table["delimiter"])
            remove_checkpoint(rd)
            tr = self.training = self._from_model(Training, X, y, config, cfg["target"], table["missing_target"])
        elif prepared is None:
            from baggr.data.table import read_table      # not .data: a bad file is told before numba is even imported
            X, y = read_table(info["path"], cfg["target"], drop=table["drop"], only=table["only"],
                              delimiter=table["delimiter"])
            tr = self.training = Training(X, y, config, target=cfg["target"], missing_target=table["missing_target"])
        else:
            tr = self.training = Training(None, None, config, prepared=prepared(config))
        seconds = compile_seconds(tr.prep.task)   # the data is good: the run will start
        if seconds:
            self._compiling(seconds)
        first = cfg["data"].get("rows") is None
        missing = tr.prep.missing_target
        if missing:
            text = missing_target_text(missing, tr.prep.n_rows, cfg["target"])
            self._note(f"warning: {text}")
            if first:   # once in the journal, not again at every resume
                self.journal.write("warning", message=text)
        if first:
            s = tr.prep.schema
            cfg["data"].update(rows=int(tr.prep.n_rows), features=int(tr.prep.codes.shape[0]),
                               missing_target=int(missing), dates=s.dates)
            cfg["resolved"] = config.resolved(s.n_features, s.task)
            rd.write_config(cfg)
        tr.warm_up()   # compiling (a first run) or loading the kernels: out of the training figures
        extra = {"sha256": info.get("sha256"), "config": config.to_dict(), "schema": tr.prep.schema.to_json(),
                 "target": cfg["target"]}
        self.checkpointer = Checkpointer(rd, tr, self.settings, extra, self.journal)
        try:
            self._resumed = self.checkpointer.restore() or self._resumed
        except ModelFileError as e:
            raise ModelFileError(f"{e}; to start this run over from member 0, remove {rd / CHECKPOINT}") from None
        if grow:
            self.checkpointer.from_model(MODEL)
            self._resumed = True
        return None

    def _from_model(self, Training, X, y, config: Config, target: str, missing_target: str):
        """The training of a finished run continued from its model file up to config.members."""
        from baggr.model.ensemble import load
        ens = load(self.rd / MODEL)
        if ens.config.replace(members=config.members) != config:
            raise ModelFileError(f"{self.rd / MODEL} belongs to other settings than the run's; it cannot be grown")
        return Training.from_ensemble(ens, X, y, config.members, target=target, missing_target=missing_target)

    def begin(self) -> None:
        """Write the start line."""
        self._start(self.training, self.cfg, self._resumed)

    @property
    def done(self) -> bool:
        """The run reached its members or settled (nothing more to grow)."""
        tr = self.training
        return tr.next_member >= tr.config.members or (self.stop_reason or "").startswith("stable")

    def advance(self, until: int, should_stop=None) -> None:
        """Grow members until `until` (at most the configured members), a stop or a settled curve.

        should_stop: a further reason to stop (a string, or None), asked after every member.
        """
        tr, rd, ck, settings = self.training, self.rd, self.checkpointer, self.settings
        until = min(until, tr.config.members)
        if tr.next_member >= until or self.done:
            return
        kill_members = os.environ.get(FAULT_KILL, "")

        def on_member(ev):
            fields = ev.journal_fields()
            self.journal.write("member", **fields)
            if self.progress is not None:
                self.progress.member(fields)
            if kill_members:
                fault_kill("member", fields["member"])
            if ck.due():
                ck.write()

        def stop_now():
            if self.stop_reason:
                return True
            if (rd / STOP).exists():
                self.stop_reason = "stop requested"
                return True
            if should_stop is not None:
                why = should_stop()
                if why:
                    self.stop_reason = why
                    return True
            if settings.stop_when_stable:
                # one rule for every measure: the chosen measure's members_needed at the refits
                from baggr.oob.measure_fit import has_estimate
                t = tr.tally
                why = stable_now(t.needed, tr.next_member, settings,
                                 t.measure if has_estimate(t.measure, t.task, t.n_classes) else "")
                if why:
                    self.stop_reason = why
                    return True
            return False

        try:
            tr.run(on_member=on_member, should_stop=stop_now, until=until, backend=self.backend)
        except ClusterLostError as e:
            self._cluster_lost(tr, e)

    def set_aside(self) -> None:
        """Free the memory of the kept trees already in the checkpoint's files (a comparison does this
        for the candidates not growing); starts a checkpoint of the newer ones in the background."""
        tr, ck = self.training, self.checkpointer
        if tr is None or not tr.config.keep_members:
            return
        ck.poll()
        tr.set_aside(ck.member)
        if tr.next_member > ck.last_started and not ck.busy:
            ck.write()

    def conclude(self) -> Outcome:
        """Save and write the end line: finished when done, else stopped (with a checkpoint)."""
        tr = self.training
        if self.done:
            return self._finished(tr)
        return self._stopped(tr, write_checkpoint=True)

    def _compiling(self, seconds: float) -> None:
        """Say, before the kernels compile on a first run, that it happens once and about how long it takes."""
        text = f"preparing compiled code, once: about {compile_words(seconds)}"
        self.journal.write("compiling", message=text, seconds=round(seconds, 1))
        self._note(text)

    def _start(self, tr, cfg: dict, resumed: bool) -> None:
        import psutil
        p = tr.prep
        classes = list(p.schema.classes)
        fields = {"pid": os.getpid(), "pid_started": psutil.Process().create_time(), "host": socket.gethostname(),
                  "threads": tr.config.resolved_threads(), "task": p.task, "classes": classes,
                  "class_rows": [int(v) for v in tr.tally.class_rows] if p.task == "classes" else [],
                  "rows": int(p.n_rows), "features": int(p.codes.shape[0]), "members_target": tr.config.members,
                  "first_member": tr.next_member, "config": tr.config.to_dict(), "version": __version__,
                  "target": cfg.get("target"), "data": cfg["data"].get("path"),
                  "resolved": tr.config.resolved(p.schema.n_features, p.task), "missing_target": p.missing_target}
        if tr.config.importance:
            fields["feature_names"] = [str(n) for n in p.schema.names]
        if resumed:
            fields["resumed"] = True
        if self.backend is not None:
            fields.update(self.backend.describe())
        self.journal.write("start", **fields)
        self.started = True
        if self.progress is not None:
            self.progress.begin(fields)

    def _save_model(self, tr) -> None:
        """Write model.npz: for kept trees, the trees file the checkpoints appended to gets the trees
        not stored yet and the rest of the model, and is renamed (the trees are written once)."""
        ens = tr.ensemble(trees=False)
        # the end line carries them (and the chosen measure's estimate)
        self._final = ens.oob.figures(tr.config.members, tr.config.resolved_measure(tr.prep.task))
        try:
            if tr.config.keep_members:
                self.checkpointer.finish_model(ens)
            else:
                ens.save(self.rd / MODEL)
        except OSError as e:
            raise write_error("the model file", self.rd / MODEL, e) from None
        except BaggrError as e:
            if "No space" in str(e) or "Disk quota" in str(e):
                raise DiskFullError(f"disk full: {e}") from None
            raise

    def _finished(self, tr) -> Outcome:
        self.saving = True
        m = tr.next_member
        if m == 0:
            raise BaggrError("no member was grown")
        self.checkpointer.wait()
        self._save_model(tr)
        fault_kill("model")
        reason = self.stop_reason if (self.stop_reason or "").startswith("stable") else f"reached {m} members"
        self._end("finished", reason)
        self.checkpointer.remove()
        return Outcome("finished", reason, m, tr.elapsed,
                       f"finished: {m} members in {fmt_seconds(tr.elapsed)}; model saved to {self.rd / MODEL}")

    def _stopped(self, tr, write_checkpoint: bool) -> Outcome:
        self.saving = True
        m = tr.next_member
        reason = self.stop_reason or "stopped"
        if m > 0:
            self.checkpointer.wait()
            if write_checkpoint and m > self.checkpointer.member:
                self.checkpointer.write(wait=True)
            self._save_model(tr)   # one copy of the trees: the model's (the checkpoint takes them from it)
        self._end("stopped", reason)
        if reason == "stop requested":
            try:
                (self.rd / STOP).unlink()   # honoured: it must not stop the next job too
            except FileNotFoundError:
                pass
        what = "model and checkpoint saved" if m else "nothing to save yet"
        return Outcome("stopped", reason, m, tr.elapsed,
                       f"stopped at {m} of {tr.config.members} members ({reason}); {what}; "
                       f"continue with: baggr resume {self.rd.path}")

    def _cluster_note(self, text: str) -> None:
        """What the cluster backend tells (workers lost or back): the journal's warnings and the progress."""
        self._note(text)
        if self.journal is not None:
            try:
                self.journal.write("warning", message=text)
            except OSError:
                pass

    def _cluster_lost(self, tr, e: ClusterLostError):
        """The scheduler went away: save a checkpoint and the model of the members folded, then fail
        (the end line says why; a resume, here or on a cluster, goes on from the checkpoint)."""
        self.saving = True
        m = tr.next_member
        if m > 0:
            self.checkpointer.wait()
            if m > self.checkpointer.member:
                self.checkpointer.write(wait=True)
            self._save_model(tr)
        saved = f"checkpoint saved at {m} of {tr.config.members} members" if m else "no member was grown"
        raise ClusterLostError(f"{e}; {saved}; continue with: baggr resume {self.rd.path} "
                               "(add --cluster ADDRESS to use a cluster again)") from None

    def _quit(self, name: str) -> Outcome:
        """A second signal: leave now without saving; the last checkpoint stays for resume."""
        m = self.checkpointer.member if self.checkpointer else 0
        reason = f"{name} twice: quit without saving; resume goes on from member {m}"
        self._end("stopped", reason)
        el = self.training.elapsed if self.training else 0.0
        return Outcome("stopped", reason, m, el, f"quit at once ({name} twice); "
                       f"continue from the checkpoint at member {m} with: baggr resume {self.rd.path}")

    def _end(self, status: str, reason: str) -> None:
        if self.journal is None:
            return
        tr = self.training
        fields = {"status": status, "reason": reason, "member": tr.next_member if tr else 0,
                  "elapsed": round(tr.elapsed, 4) if tr else 0.0}
        final = getattr(self, "_final", None)
        if final:
            # the saved ensemble's own estimate (fitted over every row), for the dashboard and the report
            from baggr.events import MemberEvent
            fields["estimate"] = MemberEvent.estimate_fields(final)
        try:
            self.journal.write("end", **fields)
        except OSError:
            pass   # a full disk may refuse even this line; the checkpoint is what matters


def _terminate_torn_line(path: Path) -> None:
    """End a torn last line (a job killed mid-write) so the next line is not glued onto it."""
    try:
        with open(path, "rb+") as f:
            f.seek(0, os.SEEK_END)
            if f.tell() == 0:
                return
            f.seek(-1, os.SEEK_END)
            if f.read(1) != b"\n":
                f.write(b"\n")
    except FileNotFoundError:
        pass


def compile_words(seconds: float) -> str:
    """'15 s', '1 min 30 s': an estimate, rounded to 5 s."""
    s = max(5, int(round(seconds / 5.0)) * 5)
    return f"{s} s" if s < 60 else f"{s // 60} min" + (f" {s % 60} s" if s % 60 else "")


def fmt_seconds(s: float) -> str:
    """4.2s / 42s / 3m 05s / 2h 10m: the one duration format of every surface (baggr.units)."""
    from baggr.units import duration
    return duration(s)

