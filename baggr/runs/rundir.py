"""A run directory: finding and making one, its settings (config.json), and the data file it was made from.

The files it holds are named in baggr.runs.files. Members are pure functions of (seed, m), so a job
killed at any moment resumes from its last checkpoint and ends bit-identical to one never
interrupted.
"""
from __future__ import annotations

import hashlib
import json
import os
import shutil
import time
from dataclasses import asdict, dataclass
from pathlib import Path

from baggr.version import __version__
from baggr.config import Config
from baggr.errors import DataError, RunDirError
from baggr.runs.files import CONFIG, JOURNAL, LOCK, MODEL, RUN_FILES, write_error, write_json_atomic
from baggr.runs.job_status import job_status
from baggr.runs.lock import Lock, lock_holder
from baggr.runs.run_state import read_state


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
    stable_min_members: int = 32     # refits from here on count for the stopping rule (job.stable_now)
    stable_refits: int = 3           # ... the last this many of them
    stable_spread: float = 0.1       # ... agree on members_needed to within this share of the latest
    stable_slack: int = 16           # ... or within this many members, whichever is more

    @classmethod
    def from_dict(cls, d: dict | None) -> "RunSettings":
        d = dict(d or {})
        known = {k: v for k, v in d.items() if k in cls.__dataclass_fields__}
        return cls(**known)


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


def data_stem(data_path) -> str:
    """The data file's name without folders and extensions (firings.csv.gz -> firings)."""
    name = Path(data_path).name
    for suffix in (".gz", ".bz2", ".zst", ".lz4"):
        if name.lower().endswith(suffix):
            name = name[: -len(suffix)]
    return Path(name).stem or "run"


def default_run_dir(data_path, root="runs", kind: str = "") -> Path:
    """runs/<data-name>-<YYYYmmdd-HHMMSS> (kind "compare": runs/<data-name>-compare-<...>), with -2,
    -3, ... if that exists already."""
    name = data_stem(data_path) + (f"-{kind}" if kind else "")
    base = Path(root) / f"{name}-{time.strftime('%Y%m%d-%H%M%S')}"
    path, k = base, 2
    while path.exists():
        path = Path(f"{base}-{k}")
        k += 1
    return path


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
            raise write_error("the run settings", self / CONFIG, e) from None

    def state(self):
        """(RunState of the journal, job status word: running / finished / stopped / failed / crashed / waiting)."""
        st = read_state(self.path)
        return st, job_status(self.path, st)

    def lock_holder(self) -> int | None:
        """Pid of the job holding the lock, or None when nobody holds it."""
        return lock_holder(self / LOCK)

    def acquire(self) -> Lock:
        return Lock(self / LOCK)


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


def init_config(rd: RunDir, *, data: dict, target: str, config: Config, settings: RunSettings,
                table: dict | None = None) -> dict:
    """Write config.json of a new run (rows and features are filled in by the job once it has read the data).

    table: how the data file is read (TABLE_OPTIONS: drop, only, delimiter, missing_target).
    """
    d = {"config": config.to_dict(), "data": dict(data, rows=None, features=None), "target": target,
         "version": __version__, "created": time.strftime("%Y-%m-%dT%H:%M:%S%z"), "run": asdict(settings),
         "table": table_options({"table": table or {}})}
    rd.write_config(d)
    return d


# How a run reads its data file, as config.json's "table" holds it (a run written before it had none).
TABLE_OPTIONS = {"drop": [], "only": [], "delimiter": None, "missing_target": "drop"}


def table_options(cfg: dict) -> dict:
    """The "table" section of a run's config.json, with the defaults filled in."""
    t = cfg.get("table") if isinstance(cfg.get("table"), dict) else {}
    out = dict(TABLE_OPTIONS)
    out.update({k: v for k, v in t.items() if k in TABLE_OPTIONS and v is not None})
    out["drop"], out["only"] = list(out["drop"]), list(out["only"])
    return out


def model_path(path) -> Path:
    """The model file of a run directory, or the path itself when it is a file; RunDirError (or
    ModelFileError) in words when there is no model to read."""
    from baggr.errors import ModelFileError
    src = Path(path).expanduser()
    if src.is_dir():
        rd = RunDir(src).require()
        if not (rd / MODEL).exists():
            st, status = rd.state()
            raise RunDirError(f"{src} has no model yet ({status_words(status, st.members)}): wait for it to "
                              "finish, or stop it (baggr stop DIR) to save one")
        return rd / MODEL
    if not src.exists():
        raise ModelFileError(f"model file not found: {src}")
    return src


def status_words(status: str, members: int | None = None) -> str:
    """A job's status in a sentence's words: "the job crashed at 350 members", "the job has not started"."""
    at = f" at {members} members" if members else ""
    if status == "waiting":
        return "the job has not started"
    if status == "running":
        return f"the job is running{at}"
    return f"the job {status}{at}"


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
