"""The job of a comparison directory: the data read and binned once, then every candidate's ordinary
run job grown in interleaved blocks of members, one candidate at a time with all the threads.

Each candidate's results depend only on (data, its settings, seed, m), never on the blocks, so a
comparison stopped or killed at any point resumes bit-identical to one never interrupted; and a
comparison stopped early holds candidates within one block of each other.
"""
from __future__ import annotations

import os
import signal
import socket

import numpy as np

from baggr.config import Config
from baggr.errors import BaggrError, ClusterLostError, ConfigError
from baggr.runs.comparison import TARGETS, Comparison
from baggr.runs.files import JOURNAL, STOP, write_error
from baggr.runs.job import Job, Outcome, _terminate_torn_line, fmt_seconds
from baggr.runs.journal_writer import JournalWriter
from baggr.runs.rundir import check_data
from baggr.version import __version__


class ComparisonJob:
    """Grows all candidates of a comparison, block by block; stops and resumes as one.

    progress: an object with begin(fields), round(fields), note(text) and end(fields) (or None).
    """

    SIGNALS = Job.SIGNALS

    def __init__(self, cmp: Comparison, progress=None, *, verify: bool = True, cluster: str | None = None):
        self.cmp, self.progress, self.verify, self.cluster = cmp, progress, verify, cluster
        self.backend = None       # a Dask cluster every candidate's members grow on (None: local threads)
        self.rd = cmp.rundir()
        self.jobs = [Job(rd, None, verify=False) for rd in cmp.run_dirs()]
        self.outcomes: list[Outcome | None] = [None] * len(self.jobs)
        self.stop_reason = None
        self.saving = False
        self.started = False
        self.journal = None
        self._old_handlers = {}

    # -- signals: one stop for all candidates
    def _on_signal(self, signum, frame):
        name = signal.Signals(signum).name
        if self.stop_reason is None:
            self.stop_reason = name
            self._note(f"{name}: stopping all candidates after the member in hand (send it again to quit at once)")
        elif not self.saving:
            raise KeyboardInterrupt(name)

    def _note(self, text: str) -> None:
        if self.progress is not None:
            self.progress.note(text)

    def _should_stop(self) -> str | None:
        if self.stop_reason:
            return self.stop_reason
        if (self.rd / STOP).exists():
            self.stop_reason = "stop requested"
            return self.stop_reason
        return None

    # -- the run
    def run(self) -> Outcome:
        lock = self.rd.acquire()
        held = []
        for sig_name in self.SIGNALS:
            sig = getattr(signal, sig_name, None)
            if sig is not None:
                try:
                    self._old_handlers[sig] = signal.signal(sig, self._on_signal)
                except ValueError:
                    pass
        try:
            try:
                _terminate_torn_line(self.rd / JOURNAL)
                self.journal = JournalWriter(self.rd / JOURNAL)
            except OSError as e:
                raise write_error("the journal", self.rd / JOURNAL, e) from None
            for job in self.jobs:
                job.acquire()
                held.append(job)
            try:
                return self._run()
            except KeyboardInterrupt as e:
                return self._quit(str(e) or "SIGINT")
            except BaggrError as e:
                self._fail(f"error: {e}")
                raise
            except OSError as e:
                err = write_error("files in", self.rd.path, e)
                self._fail(f"error: {err}")
                raise err from None
            except Exception as e:
                self._fail(f"internal error: {type(e).__name__}: {e}")
                raise
        finally:
            for sig, h in self._old_handlers.items():
                try:
                    signal.signal(sig, h)
                except (ValueError, TypeError):
                    pass
            if self.backend is not None:
                self.backend.shutdown()
            for job in held:
                job.release()
            if self.journal is not None:
                self.journal.close()
            lock.release()

    def _run(self) -> Outcome:
        cmp = self.cmp
        if self.cluster is not None:    # before the data: a wrong address is told at once
            from baggr.backends.dask import Dask
            self.backend = Dask(self.cluster, on_note=self._cluster_note)
        if self.verify:
            check_data(cmp.data)
        try:
            (self.rd / STOP).unlink()
        except FileNotFoundError:
            pass
        X = y = None
        prepared: dict = {}

        def prepared_for(config: Config):
            nonlocal X, y
            key = (config.bins, config.task)
            if key not in prepared:
                if X is None:
                    from baggr.data.table import read_table
                    X, y = read_table(cmp.data["path"], cmp.target, drop=cmp.table["drop"], only=cmp.table["only"],
                                      delimiter=cmp.table["delimiter"])
                from baggr.data.prepared import prepare
                prepared[key] = prepare(X, y, config, target=cmp.target, missing_target=cmp.table["missing_target"])
            return prepared[key]

        for i, job in enumerate(self.jobs):
            # one cluster for all candidates: they share the binned table, shipped to the workers once
            job.cluster, job.backend = self.cluster, self.backend
            self.outcomes[i] = job.open(prepared=prepared_for)
            if self.outcomes[i] is None:
                job.set_aside()      # a resumed candidate's trees are on disk: one candidate's in memory at a time
        X = y = None          # the table is binned: only the codes live on
        if prepared and self.cmp.measure:
            from baggr.oob.ranking import check_measure
            try:
                check_measure(self.cmp.measure, next(iter(prepared.values())).task)
            except ValueError as e:
                raise ConfigError(f"--measure: {e}") from None
        if prepared:
            self._write_targets(next(iter(prepared.values())))
        if self.stop_reason:
            return self._conclude()
        self._start()
        for i, job in enumerate(self.jobs):
            if self.outcomes[i] is None:
                job.begin()
        self._rounds()
        return self._conclude()

    def _active(self) -> list[int]:
        return [i for i, job in enumerate(self.jobs)
                if self.outcomes[i] is None and not job.done and job.stop_reason is None]

    def _rounds(self) -> None:
        block = max(1, self.cmp.block)
        while not self._should_stop():
            active = self._active()
            if not active:
                return
            level = min(self.jobs[i].training.next_member for i in active)
            until = (level // block + 1) * block
            for i in active:
                job = self.jobs[i]
                try:
                    job.advance(until, should_stop=self._should_stop)
                except ClusterLostError:     # the candidate in hand saved its checkpoint; so do the others
                    self._save_checkpoints()
                    raise
                if job.done:      # saved now: its model can be used while the others grow
                    self.outcomes[i] = job.conclude()
                    job.training.set_aside(job.training.next_member)   # its trees are in model.npz
                for j in active:  # the waiting candidates' trees go to disk and leave memory
                    if self.outcomes[j] is None and not self._should_stop():
                        self.jobs[j].set_aside()
                if self._should_stop():
                    break
            fields = self._round_fields(until)
            self.journal.write("round", **fields)
            if self.progress is not None:
                self.progress.round(fields)

    def _save_checkpoints(self) -> None:
        """Every candidate's members in its checkpoint (the scheduler was lost: resume goes on from there)."""
        for job, out in zip(self.jobs, self.outcomes):
            ck, tr = job.checkpointer, job.training
            if out is None and ck is not None and tr is not None:
                ck.wait()
                if tr.next_member > ck.member:
                    ck.write(wait=True)

    def _cluster_note(self, text: str) -> None:
        """What the cluster backend tells (workers lost or back): the comparison journal's warnings and the progress."""
        self._note(text)
        if self.journal is not None:
            try:
                self.journal.write("warning", message=text)
            except OSError:
                pass

    def members(self) -> list[int]:
        return [job.training.next_member if job.training is not None else (o.member if o else 0)
                for job, o in zip(self.jobs, self.outcomes)]

    def _round_fields(self, until: int) -> dict:
        rows = []
        for c, job in zip(self.cmp.candidates, self.jobs):
            tr = job.training
            if tr is None:
                rows.append({"label": c.label(), "member": None, "error": None})
                continue
            row = {"label": c.label(), "member": tr.next_member, "members": tr.config.members,
                   "error": tr.tally.error() if tr.next_member else None, "task": tr.prep.task,
                   "elapsed": tr.elapsed}
            # the chosen measure's estimate for the kept ensemble at this size, where the latest
            # refit gives one (before the first refit, or without an estimate, the line keeps the error)
            live = tr.tally.measure_live() if tr.next_member and self.cmp.measure else None
            if live is not None and live.get("value") is not None:
                row["measure"], row["value"] = live["name"], live["value"]
            rows.append(row)
        return {"until": until, "candidates": rows}

    def _start(self) -> None:
        import psutil
        cfgs = [job.training.config for job in self.jobs if job.training is not None]
        prep = next((job.training.prep for job in self.jobs if job.training is not None), None)
        fields = {"pid": os.getpid(), "pid_started": psutil.Process().create_time(), "host": socket.gethostname(),
                  "kind": "comparison", "candidates": len(self.jobs), "block": self.cmp.block,
                  "members_target": sum(c.members for c in cfgs), "first_member": sum(self.members()),
                  "threads": cfgs[0].resolved_threads() if cfgs else None, "version": __version__,
                  "target": self.cmp.target, "data": self.cmp.data.get("path"),
                  "task": prep.task if prep is not None else None,
                  "rows": int(prep.n_rows) if prep is not None else None,
                  "features": int(prep.codes.shape[0]) if prep is not None else None,
                  "labels": [c.label() for c in self.cmp.candidates], "members": self.members()}
        if self.backend is not None:
            fields.update(self.backend.describe())
        self.journal.write("start", **fields)
        self.started = True
        if self.progress is not None:
            self.progress.begin(fields)

    def _write_targets(self, prep) -> None:
        """The training rows' targets, once: the paired figures of `baggr report` need them per row."""
        from baggr.model import npzfile
        path = self.rd / TARGETS
        if path.exists():
            return
        y = prep.y_class if prep.task == "classes" else prep.y_value
        try:
            npzfile.write_atomic(path, {"y": np.ascontiguousarray(y)},
                                 {"format": "baggr-targets", "task": prep.task, "classes": list(prep.schema.classes),
                                  "sha256": self.cmp.data.get("sha256")})
        except OSError as e:
            raise write_error("the targets", path, e) from None

    def _conclude(self) -> Outcome:
        """Every candidate saved (finished, or stopped with a checkpoint), then the comparison's end line."""
        self.saving = True
        for i, job in enumerate(self.jobs):
            if self.outcomes[i] is not None or job.training is None:
                continue
            if job.stop_reason is None and not job.done and self.stop_reason:
                job.stop_reason = self.stop_reason
            if not job.started and not job.done:
                self.outcomes[i] = job._stopped(job.training, write_checkpoint=False)
            else:
                self.outcomes[i] = job.conclude()
        done = all(o is not None and o.status == "finished" for o in self.outcomes)
        m = self.members()
        elapsed = sum(job.training.elapsed for job in self.jobs if job.training is not None)
        n = len(self.jobs)
        if done:
            reason = f"all {n} candidates finished"
            self._end("finished", reason, m, elapsed)
            return Outcome("finished", reason, sum(m), elapsed,
                           f"finished: {n} candidates ({min(m)}-{max(m)} members) in {fmt_seconds(elapsed)}; "
                           f"the figures: baggr report {self.rd.path}")
        reason = self.stop_reason or "; ".join(sorted({o.reason for o in self.outcomes if o and o.status != 'finished'}))
        self._end("stopped", reason or "stopped", m, elapsed)
        if self.stop_reason == "stop requested":
            try:
                (self.rd / STOP).unlink()
            except FileNotFoundError:
                pass
        return Outcome("stopped", reason, sum(m), elapsed,
                       f"stopped with {min(m)}-{max(m)} members a candidate ({reason}); continue with: "
                       f"baggr resume {self.rd.path}")

    def _quit(self, name: str) -> Outcome:
        for i, job in enumerate(self.jobs):
            if self.outcomes[i] is None and job.training is not None:
                self.outcomes[i] = job._quit(name)
        m = [job.checkpointer.member if job.checkpointer else 0 for job in self.jobs]
        reason = f"{name} twice: quit without saving; resume goes on from each candidate's checkpoint"
        self._end("stopped", reason, m, 0.0)
        return Outcome("stopped", reason, sum(m), 0.0,
                       f"quit at once ({name} twice); continue from the checkpoints with: baggr resume {self.rd.path}")

    def _fail(self, reason: str) -> None:
        for i, job in enumerate(self.jobs):
            if self.outcomes[i] is None and job.journal is not None:
                job._end("failed", reason)
        self._end("failed", reason, self.members(), 0.0)

    def _end(self, status: str, reason: str, members, elapsed: float) -> None:
        if self.journal is None:
            return
        try:
            self.journal.write("end", status=status, reason=reason, members=members, elapsed=round(elapsed, 4))
        except OSError:
            pass
        if self.progress is not None:
            self.progress.end({"status": status, "reason": reason, "members": members})

