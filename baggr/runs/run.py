"""Run directories: config, journal, checkpoints, resume, stop requests, signals and the lock.

A run directory holds config.json, journal.jsonl, checkpoint.npz (+ checkpoint.json), the kept
trees in append-only chunk files members/AAAAAA-BBBBBB.npz, model.npz at the end, a `lock` file
(flock-ed by the job) and job.log for a detached job. Members are pure functions of (seed, m), so
a job killed at any moment resumes from its last checkpoint and ends bit-identical to one never
interrupted.
"""
from __future__ import annotations

import errno
import fcntl
import hashlib
import json
import math
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from baggr.version import __version__
from baggr.model import npzfile
from baggr.atomic import replace_atomic
from baggr.config import Config
from baggr.errors import BaggrError, DataError, ModelFileError, RunDirError  # noqa: F401

CONFIG = "config.json"
JOURNAL = "journal.jsonl"
CHECKPOINT = "checkpoint.npz"
CHECKPOINT_INFO = "checkpoint.json"
MODEL = "model.npz"
MEMBERS = "members"
LOCK = "lock"
STOP = "stop"
JOB_LOG = "job.log"
RUN_FILES = (CONFIG, JOURNAL, LOCK)         # any of these marks a folder as a run directory

CHECKPOINT_FORMAT = "baggr-checkpoint"
CHECKPOINT_VERSION = 1
CHUNK_FORMAT = "baggr-members"

FAULT_CHECKPOINT = "BAGGR_FAULT_CHECKPOINT"  # "enospc" or "enospc:N": the N-th checkpoint write fails
FAULT_KILL = "BAGGR_FAULT_KILL"              # "member:N", "chunk:N" or "model": SIGKILL itself there




class DiskFullError(BaggrError):
    """A checkpoint or model could not be written for want of space."""


# ---------------------------------------------------------------- settings of the job (not the model)

@dataclass
class RunSettings:
    """How the job checkpoints and when it stops early; stored in config.json under "run".

    checkpoint_budget: skip a due checkpoint until the time since the last one is at least 1/budget
    times what that one held up training, and at least checkpoint_min_seconds (None: exactly every
    checkpoint_members / checkpoint_seconds).
    """

    checkpoint_members: int = 50
    checkpoint_seconds: float = 30.0
    checkpoint_budget: float | None = 0.02
    checkpoint_min_seconds: float = 2.0   # with a budget: never more often (tiny data grows 50 members in ms)
    stop_when_stable: bool = False
    stable_min_members: int = 50
    stable_window: int = 25          # the window is max(stable_window, members // stable_window_part)
    stable_window_part: int = 5

    @classmethod
    def from_dict(cls, d: dict | None) -> "RunSettings":
        d = dict(d or {})
        known = {k: v for k, v in d.items() if k in cls.__dataclass_fields__}
        return cls(**known)


def stable_now(curve: np.ndarray, interval: np.ndarray, m: int, settings: RunSettings) -> str | None:
    """Why the curve counts as settled after m members (None if not).

    Rule: m >= stable_min_members, and the last w = max(stable_window, m // stable_window_part)
    values of the curve all lie within +-h of the current value, h the half-width of the current
    95% interval.
    """
    if m < settings.stable_min_members or m < 1:
        return None
    w = min(m, max(settings.stable_window, m // settings.stable_window_part))
    e = float(curve[m - 1])
    lo, hi = (float(v) for v in interval[m - 1])
    if not (math.isfinite(e) and math.isfinite(lo) and math.isfinite(hi)):
        return None
    h = (hi - lo) / 2.0
    window = np.asarray(curve[m - w:m], dtype=np.float64)
    if not np.all(np.isfinite(window)) or np.any(np.abs(window - e) > h):
        return None
    return f"stable: the OOB error stayed within {e:.4g} +- {h:.2g} over the last {w} members"


# ---------------------------------------------------------------- files and fingerprints

def fingerprint(path) -> dict:
    """{"path", "bytes", "sha256"} of a data file, hashed in chunks (never the whole file in memory)."""
    p = Path(path).expanduser()
    try:
        if p.is_dir():
            raise DataError(f"{p} is a folder, not a table file")
        with open(p, "rb") as f:
            size = os.fstat(f.fileno()).st_size
            digest = hashlib.file_digest(f, "sha256").hexdigest()
    except FileNotFoundError:
        raise DataError(f"file not found: {p}") from None
    except OSError as e:
        raise DataError(f"cannot read {p}: {e.strerror or e}") from None
    return {"path": str(p.resolve()), "bytes": size, "sha256": digest}


def write_json_atomic(path, obj) -> None:
    """Write JSON via a temp file, fsync and rename, so a reader never sees half a file."""
    def write(f):
        json.dump(obj, f, indent=1, allow_nan=False)
        f.write("\n")
    replace_atomic(path, write, mode="w", suffix=".json")


def default_run_dir(data_path, root="runs") -> Path:
    """runs/<data-name>-<YYYYmmdd-HHMMSS>, with -2, -3, ... if that exists already."""
    name = Path(data_path).name
    for suffix in (".gz", ".bz2", ".zst", ".lz4"):
        if name.lower().endswith(suffix):
            name = name[: -len(suffix)]
    name = Path(name).stem or "run"
    base = Path(root) / f"{name}-{time.strftime('%Y%m%d-%H%M%S')}"
    path, k = base, 2
    while path.exists():
        path = Path(f"{base}-{k}")
        k += 1
    return path


def _oserror(what: str, path, e: OSError) -> BaggrError:
    """A user-facing error for a failed write: disk full gets its own words."""
    if e.errno in (errno.ENOSPC, errno.EDQUOT):
        return DiskFullError(f"disk full: cannot write {what} {path} ({e.strerror or e})")
    return RunDirError(f"cannot write {what} {path}: {e.strerror or e}")


# ---------------------------------------------------------------- the run directory

class RunDir:
    """One run directory and the files in it."""

    def __init__(self, path):
        self.path = Path(path)

    def __truediv__(self, name) -> Path:
        return self.path / name

    def __str__(self) -> str:
        return str(self.path)

    # -- what is there
    def is_run_dir(self) -> bool:
        return self.path.is_dir() and any((self.path / f).exists() for f in RUN_FILES)

    def require(self) -> "RunDir":
        """Self, or a RunDirError when there is no run directory here."""
        if not self.path.exists():
            raise RunDirError(f"no run directory at {self.path}")
        if not self.path.is_dir():
            raise RunDirError(f"{self.path} is a file, not a run directory")
        if not self.is_run_dir():
            raise RunDirError(f"{self.path} is not a baggr run directory (no {CONFIG} or {JOURNAL})")
        return self

    def read_config(self) -> dict:
        p = self / CONFIG
        try:
            d = json.loads(p.read_text())
        except FileNotFoundError:
            raise RunDirError(f"{self.path} has no {CONFIG}: it is not a complete run directory") from None
        except (OSError, ValueError) as e:
            raise RunDirError(f"{p} is damaged ({e})") from None
        if not isinstance(d, dict) or not isinstance(d.get("config"), dict) or not isinstance(d.get("data"), dict):
            raise RunDirError(f"{p} is damaged (no config or data section)")
        return d

    def write_config(self, d: dict) -> None:
        try:
            write_json_atomic(self / CONFIG, d)
        except OSError as e:
            raise _oserror("the run settings", self / CONFIG, e) from None

    def state(self):
        """(RunState of the journal, job status word: running / finished / stopped / failed / crashed / waiting)."""
        from baggr.runs import journal
        st = journal.read_state(self.path)
        return st, journal.job_status(self.path, st)

    def lock_holder(self) -> int | None:
        """Pid of the job holding the lock, or None when nobody holds it."""
        try:
            fd = os.open(self / LOCK, os.O_RDWR)
        except OSError:
            return None
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            return _read_pid(fd) or -1
        else:
            fcntl.flock(fd, fcntl.LOCK_UN)
            return None
        finally:
            os.close(fd)

    def acquire(self) -> "Lock":
        return Lock(self / LOCK)


class Lock:
    """An exclusive flock on DIR/lock, holding the job's pid; released when the process ends, even on kill -9."""

    def __init__(self, path: Path):
        self.path = path
        try:
            self.fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as e:
            raise _oserror("the lock file", path, e) from None
        try:
            fcntl.flock(self.fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            pid = _read_pid(self.fd)
            os.close(self.fd)
            self.fd = None
            who = f"pid {pid}" if pid else "another process"
            raise RunDirError(f"{path.parent} is already running ({who}); watch it with: baggr watch {path.parent}") from None
        os.ftruncate(self.fd, 0)
        os.pwrite(self.fd, f"{os.getpid()}\n".encode(), 0)

    def release(self) -> None:
        if self.fd is not None:
            try:
                fcntl.flock(self.fd, fcntl.LOCK_UN)
            finally:
                os.close(self.fd)
                self.fd = None


def _read_pid(fd) -> int | None:
    try:
        return int(os.pread(fd, 32, 0).decode().strip() or 0) or None
    except (OSError, ValueError):
        return None


def create(path, *, force: bool = False) -> RunDir:
    """Make a new, empty run directory (with its lock file); an existing one is replaced only with force."""
    rd = RunDir(path)
    p = rd.path
    if p.exists() or p.is_symlink():
        if not force:
            hint = f"; continue it with: baggr resume {p}" if rd.is_run_dir() else ""
            raise RunDirError(f"run directory {p} already exists (use --force to replace it{hint})")
        if not p.is_dir():
            raise RunDirError(f"{p} is a file, not a run directory; not replacing it")
        if any(p.iterdir()) and not rd.is_run_dir():
            raise RunDirError(f"{p} is not empty and is not a baggr run directory; not replacing it")
        pid = rd.lock_holder()
        if pid:
            raise RunDirError(f"{p} is already running (pid {pid}); stop it first (baggr stop {p})")
        try:
            shutil.rmtree(p)
        except OSError as e:
            raise RunDirError(f"cannot replace {p}: {e.strerror or e}") from None
    try:
        p.mkdir(parents=True)
        (p / LOCK).touch()
    except OSError as e:
        raise RunDirError(f"cannot create the run directory {p}: {e.strerror or e}") from None
    return rd


def init_config(rd: RunDir, *, data: dict, target: str, config: Config, settings: RunSettings) -> dict:
    """Write config.json of a new run (rows and features are filled in by the job once it has read the data)."""
    d = {"config": config.to_dict(), "data": dict(data, rows=None, features=None), "target": target,
         "version": __version__, "created": time.strftime("%Y-%m-%dT%H:%M:%S%z"), "run": asdict(settings)}
    rd.write_config(d)
    return d


def check_data(info: dict) -> dict:
    """The data file's fingerprint now; RunDirError when it no longer matches the one recorded."""
    path = info.get("path")
    if not path or not os.path.exists(path):
        raise RunDirError(f"the run's data file {path} no longer exists; resume needs the very same file")
    now = fingerprint(path)
    if now["sha256"] != info.get("sha256"):
        raise RunDirError(f"the data file {path} has changed since the run started (SHA-256 was "
                          f"{str(info.get('sha256'))[:12]}..., {info.get('bytes')} bytes; now {now['sha256'][:12]}..., "
                          f"{now['bytes']} bytes): resume needs the very same data; restore the file or start a new run")
    return now


# ---------------------------------------------------------------- checkpoints

def _chunk_name(a: int, b: int) -> str:
    return f"{MEMBERS}/{a:06d}-{b:06d}.npz"


def _fault_due(count: int) -> bool:
    spec = os.environ.get(FAULT_CHECKPOINT, "")
    if not spec.startswith("enospc"):
        return False
    _, _, n = spec.partition(":")
    return count >= (int(n) if n.isdigit() else 1)


def _fault_kill(point: str, n: int | None = None) -> None:
    """Test hook: die by SIGKILL at a named point (a real kill -9, no cleanup)."""
    spec = os.environ.get(FAULT_KILL)
    if spec and spec == (point if n is None else f"{point}:{n}"):
        os.kill(os.getpid(), signal.SIGKILL)


class Checkpointer:
    """Writes checkpoints of a Training: new kept trees to a chunk file, then the tallies, atomically.

    The main thread only snapshots (a copy of the tallies, the list of new trees); the files are
    written, fsynced and renamed in a background thread, so training goes on meanwhile. One write
    at a time; its error is raised in the main thread at the next due() / wait().
    """

    def __init__(self, rd: RunDir, training, settings: RunSettings, header_extra: dict, journal=None,
                 background: bool = True):
        self.rd, self.training, self.settings = rd, training, settings
        self.header_extra, self.journal, self.background = header_extra, journal, background
        self.chunks: list = []                  # [a, b, name] of the kept trees written so far
        self.member = training.next_member      # members covered by the latest durable checkpoint
        self.last_started = self.member         # members covered by the latest write begun
        self.t_last = time.monotonic()
        self.cost = 0.0                         # seconds the latest checkpoint held up training
        self.writes = 0
        self.seconds = 0.0                      # seconds checkpoints held up training, in all
        self.write_seconds = 0.0                # seconds spent writing files (mostly in the background)
        self.write_cpu = 0.0                    # CPU seconds of that writing (what it takes from training)
        self._thread = None
        self._result = None

    @property
    def busy(self) -> bool:
        return self._thread is not None

    def due(self) -> bool:
        self.poll()
        m, s = self.training.next_member, self.settings
        if m <= self.last_started or (self.busy and s.checkpoint_budget):
            return False   # the default policy skips while a write is in flight; an exact one waits for it
        since = time.monotonic() - self.t_last
        if m - self.last_started < s.checkpoint_members and since < s.checkpoint_seconds:
            return False
        # Keep what checkpoints hold up under the budget share of the time, whatever the data size.
        return not s.checkpoint_budget or since >= max(s.checkpoint_min_seconds, self.cost / s.checkpoint_budget)

    def write(self, wait: bool = False) -> None:
        """Checkpoint the training as it is now; with wait, return once it is on disk.

        An OSError becomes DiskFullError / RunDirError and the previous checkpoint stays intact.
        """
        self.wait()
        t0 = time.monotonic()
        tr = self.training
        m = tr.next_member
        self.writes += 1
        self.last_started = m
        kept = self.chunks[-1][1] if self.chunks else 0
        trees = list(tr.trees[kept:m]) if tr.config.keep_members and m > kept else []
        arrays, header = tr.checkpoint()
        arrays = {k: np.array(v, copy=True) for k, v in arrays.items()}   # the tallies move on meanwhile
        if tr.prep.task == "classes":
            arrays["class_rows"] = np.asarray(tr.tally.class_rows, np.int64).copy()
        header.update(self.header_extra, format=CHECKPOINT_FORMAT, format_version=CHECKPOINT_VERSION,
                      baggr_version=__version__, t=time.time())
        job = (self.writes, m, kept, trees, arrays, header, list(self.chunks))
        if self.background:
            import threading
            self._thread = threading.Thread(target=self._work, args=job, name="baggr-checkpoint", daemon=True)
            self._thread.start()
        else:
            self._thread = True
            self._work(*job)
        self.t_last = time.monotonic()
        self.cost = self.t_last - t0
        self.seconds += self.cost
        if wait or not self.background:
            self.wait()

    def _work(self, n, m, kept, trees, arrays, header, chunks) -> None:
        """Write one checkpoint's files (any thread); the outcome waits in _result."""
        t0, c0 = time.monotonic(), time.thread_time()
        try:
            if trees:
                name = _chunk_name(kept, m)
                self._write_chunk(kept, m, name, trees)
                chunks.append([kept, m, name])
                _fault_kill("chunk", n)
            if _fault_due(n):
                raise OSError(errno.ENOSPC, "No space left on device (simulated by " + FAULT_CHECKPOINT + ")")
            header["chunks"] = chunks
            npzfile.write_atomic(self.rd / CHECKPOINT, arrays, header)
            write_json_atomic(self.rd / CHECKPOINT_INFO, {"member": m, "elapsed": header["elapsed"],
                                                          "t": header["t"], "chunks": chunks})
            self._result = (m, chunks, None, time.monotonic() - t0, time.thread_time() - c0)
        except BaseException as e:   # handed to the main thread
            self._result = (m, None, e, time.monotonic() - t0, time.thread_time() - c0)

    def poll(self) -> None:
        """Take in a finished background write (raising its error)."""
        if self._thread is not None and (self._thread is True or not self._thread.is_alive()):
            self._take()

    def wait(self) -> None:
        """Wait for the write in flight, if any (raising its error)."""
        if self._thread is not None:
            t0 = time.monotonic()
            if self._thread is not True:
                self._thread.join()
            self.seconds += time.monotonic() - t0 if self.background else 0.0
            self._take()

    def _take(self) -> None:
        m, chunks, err, took, cpu = self._result
        self._thread, self._result = None, None
        self.write_seconds += took
        self.write_cpu += cpu
        if err is not None:
            if isinstance(err, OSError):
                raise _oserror("a checkpoint to", self.rd.path, err) from None
            raise err
        self.chunks, self.member = chunks, m
        if self.journal is not None:
            self.journal.write("checkpoint", member=m)

    def _write_chunk(self, a: int, b: int, name: str, trees: list) -> None:
        from baggr.model.forest import Forest
        path = self.rd / name
        path.parent.mkdir(exist_ok=True)
        forest = Forest.pack(trees, self.training.n_out)
        npzfile.write_atomic(path, forest.arrays, {"format": CHUNK_FORMAT, "format_version": CHECKPOINT_VERSION,
                                                   "first": a, "last": b})

    def restore(self) -> bool:
        """Continue the training from the checkpoint on disk, if any; True when one was loaded."""
        path = self.rd / CHECKPOINT
        if not path.exists():
            self._drop_unreferenced()
            return False
        header, arrays = npzfile.read(path, "checkpoint file")
        check_checkpoint_header(path, header, "resume")
        tr = self.training
        if header.get("config") != tr.config.to_dict():
            raise ModelFileError(f"{path} belongs to other settings than {CONFIG}; it cannot be resumed")
        if header.get("sha256") not in (None, self.header_extra.get("sha256")):
            raise ModelFileError(f"{path} was made from other data than the run's data file")
        chunks = header.get("chunks") or []
        trees, expect = [], 0
        if tr.config.keep_members:
            trees = self._load_chunks(chunks, tr.prep.codes.shape[0])
            expect = len(trees)
        tally = {k: v for k, v in arrays.items() if k.startswith("tally_")}
        tr.restore(tally, header, trees if tr.config.keep_members else None)
        if tr.config.keep_members and expect != tr.next_member:
            raise ModelFileError(f"{path}: chunk files hold {expect} members, the tallies {tr.next_member}")
        self.chunks, self.member = [list(c) for c in chunks], tr.next_member
        self.last_started = self.member
        self._drop_unreferenced()
        return True

    def _load_chunks(self, chunks, n_features: int) -> list:
        from baggr.model.forest import Forest
        trees, at = [], 0
        for c in chunks:
            if not (isinstance(c, list) and len(c) == 3 and c[0] == at and c[1] > c[0] and isinstance(c[2], str)
                    and c[2] == _chunk_name(c[0], c[1])):
                raise ModelFileError(f"{self.rd / CHECKPOINT}: its list of member files is damaged")
            h, a = npzfile.read(self.rd / c[2], "members file")
            if h.get("format") != CHUNK_FORMAT or h.get("first") != c[0] or h.get("last") != c[1]:
                raise ModelFileError(f"{self.rd / c[2]} is not the members file the checkpoint names")
            forest = Forest(a)
            forest.validate(n_features, self.training.n_out)
            if forest.members != c[1] - c[0]:
                raise ModelFileError(f"{self.rd / c[2]} holds {forest.members} members, not {c[1] - c[0]}")
            trees.extend(forest.unpack())
            at = c[1]
        return trees

    def _drop_unreferenced(self) -> None:
        """Remove what a killed job left half done: chunk files its checkpoint never named, temp files."""
        folder = self.rd / MEMBERS
        keep = {Path(c[2]).name for c in self.chunks}
        stale = list(self.rd.path.glob(".tmp-*"))
        if folder.is_dir():
            stale += [f for f in folder.iterdir() if f.name not in keep]
        for f in stale:
            try:
                f.unlink()
            except OSError:
                pass

    def remove(self) -> None:
        remove_checkpoint(self.rd)


def remove_checkpoint(rd: RunDir) -> None:
    """Drop the checkpoint and chunk files once model.npz holds everything."""
    for name in (CHECKPOINT, CHECKPOINT_INFO):
        try:
            (rd / name).unlink()
        except FileNotFoundError:
            pass
    shutil.rmtree(rd / MEMBERS, ignore_errors=True)


def read_checkpoint(rd: RunDir) -> tuple[dict, dict] | None:
    """(header, arrays) of the run's checkpoint, or None; a reader may call this while the job replaces it."""
    path = rd / CHECKPOINT
    if not path.exists():
        return None
    try:
        header, arrays = npzfile.read(path, "checkpoint file")
    except ModelFileError:
        if not path.exists():       # replaced or removed between the check and the read
            return None
        raise
    check_checkpoint_header(path, header, "read")
    return header, arrays


def check_checkpoint_header(path, header: dict, to: str) -> None:
    """Refuse a file that is not a baggr checkpoint or comes from a newer format; `to`: what the
    upgrade would let the user do ("resume", "read")."""
    if header.get("format") != CHECKPOINT_FORMAT:
        raise ModelFileError(f"{path} is not a baggr checkpoint")
    v = header.get("format_version")
    if not isinstance(v, int) or v > CHECKPOINT_VERSION:
        raise ModelFileError(f"{path} was written by a newer baggr (checkpoint format {v!r}; this baggr "
                             f"{__version__} reads up to {CHECKPOINT_VERSION}): upgrade baggr to {to} it")


# ---------------------------------------------------------------- the job

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
    """

    SIGNALS = ("SIGINT", "SIGTERM", "SIGHUP")

    def __init__(self, rd: RunDir, progress=None, *, verify: bool = True):
        self.rd, self.progress, self.verify = rd, progress, verify
        self.started = False         # the start line was written
        self.stop_reason = None
        self.saving = False
        self.journal = None
        self.training = None
        self.checkpointer = None
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
        from baggr.runs.journal import JournalWriter
        lock = self.rd.acquire()
        self._install_signals()
        try:
            try:
                _terminate_torn_line(self.rd / JOURNAL)
                self.journal = JournalWriter(self.rd / JOURNAL)
            except OSError as e:
                raise _oserror("the journal", self.rd / JOURNAL, e) from None
            try:
                return self._run()
            except KeyboardInterrupt as e:
                return self._quit(str(e) or "SIGINT")
            except BaggrError as e:
                self._end("failed", f"error: {e}")
                raise
            except OSError as e:   # a full or read-only disk under the run directory: the user's to fix
                err = _oserror("files in", self.rd.path, e)
                self._end("failed", f"error: {err}")
                raise err from None
            except Exception as e:
                self._end("failed", f"internal error: {type(e).__name__}: {e}")
                raise
        finally:
            self._restore_signals()
            if self.journal is not None:
                self.journal.close()
            lock.release()

    def _run(self) -> Outcome:
        rd = self.rd
        cfg = rd.read_config()
        config = Config.from_dict(cfg["config"])
        settings = RunSettings.from_dict(cfg.get("run"))
        info = cfg["data"]
        st, _ = rd.state()
        if st.status == "finished" and (rd / MODEL).exists():
            remove_checkpoint(rd)   # a crash may have left them after the end line
            return Outcome("finished", st.reason or "finished", st.members, st.elapsed,
                           f"{rd.path} is finished ({st.members} members); nothing to resume")
        if self.verify:
            check_data(info)
        try:
            (rd / STOP).unlink()     # a stop request from an earlier job is not meant for this one
        except FileNotFoundError:
            pass
        from baggr.data.table import read_table      # not .data: a bad file is told before numba is even imported
        X, y = read_table(info["path"], cfg["target"])
        from baggr.engine import Training
        tr = self.training = Training(X, y, config, target=cfg["target"])
        if cfg["data"].get("rows") is None:
            cfg["data"].update(rows=int(tr.prep.n_rows), features=int(tr.prep.codes.shape[0]))
            rd.write_config(cfg)
        extra = {"sha256": info.get("sha256"), "config": config.to_dict(), "schema": tr.prep.schema.to_json(),
                 "target": cfg["target"]}
        self.checkpointer = ck = Checkpointer(rd, tr, settings, extra, self.journal)
        try:
            resumed = ck.restore()
        except ModelFileError as e:
            raise ModelFileError(f"{e}; to start this run over from member 0, remove {rd / CHECKPOINT}") from None
        if self.stop_reason:
            return self._stopped(tr, write_checkpoint=False)
        self._start(tr, cfg, resumed or st.starts > 0)
        if tr.next_member < config.members:
            kill_members = os.environ.get(FAULT_KILL, "")

            def on_member(ev):
                fields = ev.journal_fields()
                self.journal.write("member", **fields)
                if self.progress is not None:
                    self.progress.member(fields)
                if kill_members:
                    _fault_kill("member", fields["member"])
                if ck.due():
                    ck.write()

            def should_stop():
                if self.stop_reason:
                    return True
                if (rd / STOP).exists():
                    self.stop_reason = "stop requested"
                    return True
                if settings.stop_when_stable:
                    why = stable_now(tr.tally.curve, tr.tally.curve_interval, tr.next_member, settings)
                    if why:
                        self.stop_reason = why
                        return True
                return False

            tr.run(on_member=on_member, should_stop=should_stop)
        if tr.next_member >= config.members or (self.stop_reason or "").startswith("stable"):
            return self._finished(tr)
        return self._stopped(tr, write_checkpoint=True)

    def _start(self, tr, cfg: dict, resumed: bool) -> None:
        import psutil
        p = tr.prep
        classes = list(p.schema.classes)
        fields = {"pid": os.getpid(), "pid_started": psutil.Process().create_time(), "host": socket.gethostname(),
                  "threads": tr.config.resolved_threads(), "task": p.task, "classes": classes,
                  "class_rows": [int(v) for v in tr.tally.class_rows] if p.task == "classes" else [],
                  "rows": int(p.n_rows), "features": int(p.codes.shape[0]), "members_target": tr.config.members,
                  "first_member": tr.next_member, "config": tr.config.to_dict(), "version": __version__,
                  "target": cfg.get("target"), "data": cfg["data"].get("path")}
        if resumed:
            fields["resumed"] = True
        self.journal.write("start", **fields)
        self.started = True
        if self.progress is not None:
            self.progress.begin(fields)

    def _save_model(self, tr) -> None:
        ens = tr.ensemble()
        try:
            ens.save(self.rd / MODEL)
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
        _fault_kill("model")
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
            self._save_model(tr)
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


def fmt_seconds(s: float) -> str:
    """1:02:03 / 2:03 / 4.2 s."""
    if s is None or not math.isfinite(s):
        return "-"
    if s < 60:
        return f"{s:.1f} s"
    s = int(round(s))
    h, rem = divmod(s, 3600)
    m, sec = divmod(rem, 60)
    return f"{h}:{m:02d}:{sec:02d}" if h else f"{m}:{sec:02d}"


# ---------------------------------------------------------------- the detached job

def spawn(rd: RunDir, *, verify: bool = False) -> subprocess.Popen:
    """Start the job as its own process in its own session (a dropped SSH link does not end it)."""
    pkg_root = str(Path(__file__).resolve().parent.parent)
    env = dict(os.environ)
    env["PYTHONPATH"] = pkg_root + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    args = [sys.executable, "-m", "baggr.cli", "_job", str(rd.path)]
    if verify:
        args.append("--verify")
    try:
        log = open(rd / JOB_LOG, "ab")
    except OSError as e:
        raise _oserror("the job log", rd / JOB_LOG, e) from None
    with log:
        return subprocess.Popen(args, start_new_session=True, stdin=subprocess.DEVNULL, stdout=log,
                                stderr=subprocess.STDOUT, env=env, close_fds=True)


def wait_started(rd: RunDir, proc: subprocess.Popen, starts_before: int, poll=0.1, on_wait=None) -> int | None:
    """Wait until the job writes a new start line (None) or exits first (its return code)."""
    from baggr.runs.journal import JournalReader
    reader = JournalReader(rd / JOURNAL)
    starts = 0
    while True:
        for ev in reader.read_new():
            if ev.get("event") == "start":
                starts += 1
        if starts > starts_before:
            return None
        code = proc.poll()
        if code is not None:
            for ev in reader.read_new():
                if ev.get("event") == "start":
                    starts += 1
            return None if starts > starts_before else code
        if on_wait is not None:
            on_wait()
        time.sleep(poll)


def job_error_line(rd: RunDir) -> str | None:
    """The last "baggr: ..." line of job.log (what a failed detached job said)."""
    try:
        lines = (rd / JOB_LOG).read_text(errors="replace").splitlines()
    except OSError:
        return None
    for line in reversed(lines):
        if line.startswith("baggr:"):
            return line
    return None
