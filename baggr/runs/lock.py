"""The lock of a run directory: an exclusive flock on DIR/lock held by the job, with its pid in the file."""
from __future__ import annotations

import fcntl
import os
from pathlib import Path

from baggr.errors import RunDirError
from baggr.runs.files import write_error


class Lock:
    """An exclusive flock on DIR/lock, holding the job's pid; released when the process ends, even on kill -9."""

    def __init__(self, path: Path):
        self.path = path
        try:
            self.fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as e:
            raise write_error("the lock file", path, e) from None
        try:
            fcntl.flock(self.fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            pid = read_pid(self.fd)
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


def lock_holder(path) -> int | None:
    """Pid of the process holding the lock file at path (-1 when it wrote none), or None when nobody holds it."""
    try:
        fd = os.open(path, os.O_RDWR)
    except OSError:
        return None
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        return read_pid(fd) or -1
    else:
        fcntl.flock(fd, fcntl.LOCK_UN)
        return None
    finally:
        os.close(fd)


def read_pid(fd) -> int | None:
    """The pid written in an open lock file, or None."""
    try:
        return int(os.pread(fd, 32, 0).decode().strip() or 0) or None
    except (OSError, ValueError):
        return None
