"""The opening read of a long journal in a child process, beside the dashboard's own start-up.

Parsing JSON is the cost of opening a long journal (about 1 s per 100,000 member lines here) and
importing Textual is about 0.5 s more; both are Python work, so threads cannot overlap them. A
forked child reads and folds the journal on the second core meanwhile and sends the folded state back.
"""
from __future__ import annotations

import multiprocessing
import threading
from pathlib import Path

from baggr.runs.journal import JOURNAL, JournalReader, RunState

MIN_BYTES = 4 << 20      # smaller journals read faster than a child starts and sends back


def _read_all(path: str, conn) -> None:
    state = RunState()
    reader = JournalReader(path)
    try:
        while reader.read_into(state.fold, 1 << 20) or reader.pending_bytes():
            if reader.restarted:
                state.reset()
        conn.send((state, reader))
    finally:
        conn.close()


class Opening:
    """A read of the whole journal under way in a child; `result()` waits for (state, reader) or None."""

    def __init__(self, run_dir):
        self._conn = None
        self._proc = None
        path = Path(run_dir) / JOURNAL
        try:
            big = path.stat().st_size >= MIN_BYTES
        except OSError:
            big = False
        # Fork only where it exists and no other thread runs (a fork copies one thread only).
        if not big or "fork" not in multiprocessing.get_all_start_methods() or threading.active_count() > 1:
            return
        ctx = multiprocessing.get_context("fork")
        self._conn, child = ctx.Pipe(duplex=False)
        self._proc = ctx.Process(target=_read_all, args=(str(path), child), daemon=True,
                                 name="baggr-journal-opening")
        self._proc.start()
        child.close()

    def result(self) -> tuple[RunState, JournalReader] | None:
        """The folded state and the reader positioned after it; None when there was no child or it failed."""
        if self._proc is None:
            return None
        try:
            return self._conn.recv()
        except (EOFError, OSError):
            return None
        finally:
            self._conn.close()
            self._proc.join(timeout=5)
            self._proc = None

    def cancel(self) -> None:
        if self._proc is not None:
            self._proc.kill()
            self._proc.join(timeout=2)
            self._proc = None
