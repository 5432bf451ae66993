"""The job's process as the operating system sees it: pid, CPU, memory and threads (a line of the progress panel)."""
from __future__ import annotations

import time

from dataclasses import dataclass

import psutil
from baggr.runs.journal import pid_alive, same_host

from .. import fmt


@dataclass
class ProcessFigures:
    """One look at the job's process."""

    pid: int | None
    host: str | None
    alive: bool
    local: bool = True
    threads: int | None = None
    cpu: float | None = None        # percent of one core, summed over threads
    rss: int | None = None


class ProcessProbe:
    """Keeps one psutil handle on the start line's process, so CPU % is measured between looks."""

    EVERY = 2.0     # s between readings of a live process: steadier CPU %, fewer repaints

    def __init__(self, clock=time.monotonic):
        self._key = None
        self._proc = None
        self._clock = clock
        self._last = None          # (time, figures) of the last reading of a live process

    def look(self, pid, pid_started, host) -> ProcessFigures:
        """The process's figures; a live one is read again at most every EVERY seconds."""
        now = self._clock()
        last = self._last
        if (last is not None and now - last[0] < self.EVERY and last[1].alive
                and self._key == (pid, pid_started) and last[1].host == host):
            return last[1]
        figures = self._look(pid, pid_started, host)
        self._last = (now, figures)
        return figures

    def _look(self, pid, pid_started, host) -> ProcessFigures:
        if pid is None:
            return ProcessFigures(None, host, False)
        if not same_host(host):
            return ProcessFigures(pid, host, False, local=False)
        key = (pid, pid_started)
        if key != self._key:
            self._key, self._proc = key, None
            if pid_alive(pid, pid_started):
                try:
                    self._proc = psutil.Process(int(pid))
                    self._proc.cpu_percent(None)     # the first reading is always 0: start the clock
                except psutil.Error:
                    self._proc = None
        proc = self._proc
        if proc is None:
            return ProcessFigures(pid, host, False)
        try:
            with proc.oneshot():
                if proc.status() == psutil.STATUS_ZOMBIE:
                    raise psutil.NoSuchProcess(proc.pid)
                return ProcessFigures(pid, host, True, threads=proc.num_threads(),
                                      cpu=proc.cpu_percent(None), rss=proc.memory_info().rss)
        except psutil.Error:
            self._proc = None
            return ProcessFigures(pid, host, False)


def process_parts(p: ProcessFigures) -> list[str]:
    """The job's process in words, most telling first: what a narrow panel drops starts from the end."""
    if p.pid is None:
        return []
    if not p.local:
        return [f"on {p.host}", "not measured from here"]
    if not p.alive:
        return []
    return [f"cpu {p.cpu:.0f}%", fmt.size(p.rss), f"{p.threads} thread" + ("" if p.threads == 1 else "s")]


def process_key(p: ProcessFigures) -> tuple:
    """What the panel shows of the process: CPU in whole percent and memory in MB (a repaint when these change)."""
    return (p.pid, p.host, p.alive, p.local, p.threads, None if p.cpu is None else round(p.cpu), fmt.size(p.rss))
