"""Members grown in local threads (the kernels release the GIL), handed back in member order."""
from __future__ import annotations

import collections
from concurrent.futures import ThreadPoolExecutor

from baggr.backends.base import Backend
from baggr.backends.member import Grower

EXTRA_MEMBER_ROWS = 1 << 19


class Threads(Backend):
    """A pool of `threads` workers, each growing one member at a time."""

    def __init__(self, threads: int):
        self.threads = threads
        self._pool: ThreadPoolExecutor | None = None
        self._inflight: collections.deque = collections.deque()

    def members(self, grower: Grower, start: int, stop: int):
        # one member more than threads in flight: a worker that finishes starts the next at once,
        # while the caller folds (in member order) the one before; not on large tables, where the
        # fold is a small part of a member and each waiting delta holds 8 bytes per OOB row
        extra = 1 if grower.prep.n_rows <= EXTRA_MEMBER_ROWS else 0
        self._pool = ThreadPoolExecutor(max_workers=self.threads, thread_name_prefix="baggr-member")
        inflight = self._inflight
        nxt = start
        for _ in range(start, stop):
            while nxt < stop and len(inflight) < self.threads + extra:
                inflight.append(self._pool.submit(grower.grow_member, nxt))
                nxt += 1
            yield inflight.popleft().result()

    def close(self) -> None:
        for f in self._inflight:
            f.cancel()
        self._inflight.clear()
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None
