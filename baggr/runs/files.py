"""The files of a run directory: their names, and writing them so that nothing finished is lost.

A run directory holds config.json, journal.jsonl, checkpoint.npz (+ checkpoint.json), the kept
trees appended to members/trees.npz (which becomes model.npz at the end: trees_file.py), a `lock` file
(flock-ed by the job) and job.log for a detached job.
"""
from __future__ import annotations

import errno
import json

from baggr.atomic import replace_atomic
from baggr.errors import BaggrError, RunDirError

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


class DiskFullError(BaggrError):
    """A checkpoint or model could not be written for want of space."""


def write_json_atomic(path, obj) -> None:
    """Write JSON via a temp file, fsync and rename, so a reader never sees half a file."""
    def write(f):
        json.dump(obj, f, indent=1, allow_nan=False)
        f.write("\n")
    replace_atomic(path, write, mode="w", suffix=".json")


def write_error(what: str, path, e: OSError) -> BaggrError:
    """A user-facing error for a failed write: disk full gets its own words."""
    if e.errno in (errno.ENOSPC, errno.EDQUOT):
        return DiskFullError(f"disk full: cannot write {what} {path} ({e.strerror or e})")
    return RunDirError(f"cannot write {what} {path}: {e.strerror or e}")
