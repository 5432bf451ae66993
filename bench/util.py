"""Shared pieces of the benchmarks: the reference problems of DESIGN.md and a peak-memory sampler."""
import os
import sys
import threading
import time

import psutil

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "tests"))
from generators import friedman1, twonorm  # noqa: E402,F401  (published generators, fixed seeds)


class PeakRSS:
    """Samples this process's resident memory every millisecond in a thread; keeps the maximum."""

    def __init__(self):
        self.proc, self.peak, self._stop = psutil.Process(), 0, threading.Event()

    def __enter__(self):
        self.start = self.peak = self.proc.memory_info().rss
        self._t = threading.Thread(target=self._run, daemon=True)
        self._t.start()
        return self

    def _run(self):
        while not self._stop.is_set():
            self.peak = max(self.peak, self.proc.memory_info().rss)
            time.sleep(0.001)

    def __exit__(self, *exc):
        self._stop.set()
        self._t.join()
        self.peak = max(self.peak, self.proc.memory_info().rss)


def mib(n: float) -> str:
    return f"{n / 2**20:.1f} MiB"
