"""Atomic file replacement (pure Python): readers see the old file or the new one, never half of one."""
from __future__ import annotations

import os
import tempfile

_UMASK = os.umask(0)
os.umask(_UMASK)


def ordinary_mode(path) -> None:
    """Give a file made by mkstemp (0600) the mode an ordinary new file gets under the umask."""
    os.chmod(path, 0o666 & ~_UMASK)


def replace_atomic(path, write, *, mode: str = "wb", suffix: str = "", durable: bool = True) -> None:
    """Write a file through write(f) into a temp file beside path, fsync it and rename it over path.

    durable: also fsync the file and its folder, so the rename survives a power cut.
    """
    path = os.fspath(path)
    folder = os.path.dirname(os.path.abspath(path))
    fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=suffix, dir=folder)
    try:
        os.fchmod(fd, 0o666 & ~_UMASK)  # mkstemp makes 0600; these files are as shareable as any other
        with os.fdopen(fd, mode) as f:
            write(f)
            f.flush()
            if durable:
                os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
    if durable:
        try:
            dfd = os.open(folder, os.O_RDONLY)
            try:
                os.fsync(dfd)
            finally:
                os.close(dfd)
        except OSError:
            pass
