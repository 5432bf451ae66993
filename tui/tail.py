"""The tailing thread: reads the journal, splits lines, folds them into the shared state, posts notes."""
from __future__ import annotations

import threading
from pathlib import Path

from baggr.runs.journal import JOURNAL, JournalReader, RunState

from .messages import JournalAdvanced, JournalRestarted, JournalTrouble

BURST = 20_000       # lines after which a long burst is shown before it is all read
CHUNK = 1 << 20      # bytes per read: bounds memory (and the garbage collector's work) during a long opening read


class Tail:
    """Follows a run directory's journal into a RunState guarded by `lock`.

    Folding an event is a few appends, so it happens here rather than in the UI thread: the UI
    only ever copies figures out of the state, and a burst of lines can never queue up in front of it.
    """

    def __init__(self, run_dir, post, *, poll: float = 0.1, opening=None):
        self.path = Path(run_dir) / JOURNAL
        self.state = RunState()
        self.lock = threading.Lock()
        self.reader = JournalReader(self.path)
        self._post = post
        self._poll = poll
        self._stop = threading.Event()
        self._wake = threading.Event()    # set by wake(): read now rather than at the end of the poll
        self.quiet = False                # set by a UI that redraws on its own clock: no JournalAdvanced notes
        self._thread: threading.Thread | None = None
        self._unsent = 0
        self.waiting = threading.Event()   # set while a JournalAdvanced is posted and not yet handled
        self.caught_up = threading.Event() # set once the opening read reached the end of the file
        self.lines = 0
        self._opening = opening           # an Opening whose child reads the journal so far, or None

    def step(self) -> tuple[int, bool]:
        """Read and fold once; returns (events folded, more bytes may be waiting)."""
        with self.lock:
            n = self.reader.read_into(self.state.fold, CHUNK)
            if self.reader.restarted:       # a new or cut file: what was folded came from the old one
                self.state.reset()
        if self.reader.restarted:
            self.lines = 0
            self._post(JournalRestarted(self.reader.restarts))
            return 0, True
        self.lines += n
        return n, self.reader.pending_bytes()

    def notify(self, backlog: bool) -> None:
        """Post a JournalAdvanced unless one is still waiting to be handled (the UI never falls behind)."""
        if self.quiet:
            self._unsent = 0
            return
        if self._unsent and not self.waiting.is_set():
            self.waiting.set()
            with self.lock:
                members = self.state.members
            self._post(JournalAdvanced(self._unsent, members, backlog))
            self._unsent = 0

    def _take_opening(self) -> None:
        got = self._opening.result()
        self._opening = None
        if got is not None:
            state, reader = got
            with self.lock:
                self.state, self.reader = state, reader
            self.lines = state.events
            self._unsent = state.events

    def run(self) -> None:
        if self._opening is not None:
            self._take_opening()
        trouble = None
        while not self._stop.is_set():
            try:
                n, more = self.step()
                trouble = None
            except Exception as exc:        # unreadable journal (or a fault here): say so once, keep trying
                n, more = 0, False
                why = exc.strerror if isinstance(exc, OSError) and exc.strerror else repr(exc)
                text = f"cannot read {self.path}: {why}"
                if text != trouble:
                    trouble = text
                    self._post(JournalTrouble(text))
            self._unsent += n
            # The opening read: the UI waits for the end of it. Later bursts: tell it every so often.
            if more and not (self.caught_up.is_set() and self._unsent >= BURST):
                continue
            self.caught_up.set()
            self.notify(backlog=False)
            if not more:
                self._wake.wait(self._poll)
                self._wake.clear()

    def wake(self) -> None:
        """Read now: a UI that draws on a clock calls this once a tick, so that the thread wakes
        only then (each wake-up of a thread costs the job sharing the cores more than the read)."""
        self._wake.set()

    def start(self) -> None:
        self._thread = threading.Thread(target=self.run, name="baggr-journal-tail", daemon=True)
        self._thread.start()

    def stop(self) -> None:
        self._stop.set()
        self._wake.set()
        if self._opening is not None:
            self._opening.cancel()
        if self._thread is not None:
            self._thread.join(timeout=2)
