"""Writing a journal: appended lines, one write call each, never truncated. Pure Python."""
from __future__ import annotations

import os
import time
from pathlib import Path

from baggr.runs.journal_lines import dumps


class JournalWriter:
    """Appends events to a journal, one flushed line each; never truncates."""

    def __init__(self, path, *, get_time=time.time):
        self.path = Path(path)
        self._get_time = get_time
        # O_APPEND: every line lands at the end even if another writer appended meanwhile.
        self._fd = os.open(self.path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)

    def write(self, event: str, **fields) -> None:
        """Append one event line ("event" and "t" are added)."""
        data = (dumps(event, fields, self._get_time()) + "\n").encode()
        # One write call per line, so a reader sees at most a torn tail, never interleaved halves.
        view = memoryview(data)
        while view:
            n = os.write(self._fd, view)
            view = view[n:]

    def fsync(self) -> None:
        """Force the lines written so far to disk."""
        os.fsync(self._fd)

    def close(self) -> None:
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def __del__(self):
        try:
            self.close()
        except Exception:
            pass
