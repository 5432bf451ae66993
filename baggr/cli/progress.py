"""Progress of a training job: a rich progress bar on a terminal, plain lines otherwise (logs, nohup, pipes).

Both take the journal's own fields (start, member, end), so a job in this process and a detached one
followed through its journal look the same.
"""
from __future__ import annotations

import math
import sys
import time

from baggr.runs import fmt_seconds


def _num(v, digits=4) -> str:
    return "-" if v is None or (isinstance(v, float) and math.isnan(v)) else f"{v:.{digits}f}"


def estimate_text(fields: dict, task: str | None) -> str:
    """'OOB error 0.1530 (95% 0.1310-0.1770)' (or MSE and R2 for regression) from a member line."""
    what = "OOB MSE" if task == "regression" else "OOB error"
    err, iv = fields.get("error"), fields.get("interval")
    digits = 4 if task != "regression" else 4
    if err is None:
        return f"{what} - (no row left out yet)"
    fmt = (lambda v: f"{v:.4g}") if task == "regression" else (lambda v: _num(v, digits))
    text = f"{what} {fmt(err)}"
    if iv and iv[0] is not None and iv[1] is not None:
        text += f" (95% {fmt(iv[0])}-{fmt(iv[1])})"
    if task == "regression" and fields.get("r2") is not None:
        text += f"  R2 {fields['r2']:.3f}"
    return text


class PlainProgress:
    """One line per `every` members or per `seconds`, and the first and last: reads well in `tail -f`."""

    def __init__(self, stream=None, seconds: float = 10.0, get_time=time.monotonic):
        self.stream = stream or sys.stdout
        self.seconds, self.get_time = seconds, get_time
        self.task, self.target, self.every, self.first = None, None, 10, 0
        self.last_member, self.last_t = None, None
        self.pending = None
        self.dead = False

    def _say(self, line: str) -> None:
        if self.dead:
            return
        try:
            self.stream.write(line + "\n")
            self.stream.flush()
        except (OSError, ValueError):   # the terminal is gone (SSH dropped): train on quietly
            self.dead = True

    def begin(self, start: dict) -> None:
        self.task = start.get("task")
        self.target = start.get("members_target")
        self.every = max(10, (self.target or 0) // 20)
        self.first = start.get("first_member", 0) or 0
        self.last_member, self.last_t = self.first, self.get_time()
        what = f"{len(start.get('classes') or [])} classes" if self.task == "classes" else "regression"
        verb = f"resuming at member {start.get('first_member')}" if start.get("resumed") else "training"
        self._say(f"{verb}: {self.target} members on {start.get('rows')} rows x {start.get('features')} features "
                  f"({what}), {start.get('threads')} threads")

    def line(self, f: dict) -> str:
        m, target = f.get("member"), self.target or 0
        width = len(str(target)) if target else 1
        pct = f"{100.0 * m / target:3.0f}%" if target else ""
        rate = f.get("rate") or 0.0
        left = (target - m) / rate if rate > 0 and target else None
        cov = f.get("coverage")
        parts = [f"member {m:>{width}}/{target} {pct}", estimate_text(f, self.task),
                 f"coverage {100 * cov:.1f}%" if cov is not None else "coverage -",
                 f"{rate:.2f} members/s" if rate else "", f"elapsed {fmt_seconds(f.get('elapsed'))}",
                 f"left ~{fmt_seconds(left)}" if left is not None else ""]
        return "  ".join(p for p in parts if p)

    def member(self, f: dict) -> None:
        now = self.get_time()
        m = f.get("member", 0)
        self.pending = f
        due = (self.last_member is None or m - self.last_member >= self.every or now - self.last_t >= self.seconds
               or m == self.target or m == self.first + 1)
        if due:
            self._say(self.line(f))
            self.last_member, self.last_t, self.pending = m, now, None

    def note(self, text: str) -> None:
        self._say(text)

    def end(self, end: dict) -> None:
        if self.pending is not None:       # the last member line not printed yet
            self._say(self.line(self.pending))
            self.pending = None

    def close(self) -> None:
        pass


class RichProgress:
    """A live progress bar with the running OOB estimate, for a terminal."""

    def __init__(self, console=None):
        from rich.console import Console
        from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn
        self.console = console or Console()
        self.bar = Progress(TextColumn("[bold]{task.description}"), BarColumn(), MofNCompleteColumn(),
                            TextColumn("{task.fields[estimate]}"), TextColumn("{task.fields[times]}"),
                            console=self.console, transient=False, refresh_per_second=4)
        self.task_id = None
        self.task = None
        self.started = False
        self.dead = False

    def _guard(self, fn, *a):
        if self.dead:
            return
        try:
            fn(*a)
        except (OSError, ValueError):
            self.dead = True

    def begin(self, start: dict) -> None:
        def go():
            self.task = start.get("task")
            verb = "resuming" if start.get("resumed") else "training"
            if not self.started:
                self.bar.start()
                self.started = True
            if self.task_id is None:
                self.task_id = self.bar.add_task(verb, total=start.get("members_target"),
                                                 completed=start.get("first_member", 0), estimate="", times="")
            else:
                self.bar.update(self.task_id, description=verb, completed=start.get("first_member", 0))
        self._guard(go)

    def member(self, f: dict) -> None:
        def go():
            if self.task_id is None:
                return
            rate = f.get("rate") or 0.0
            total = self.bar.tasks[0].total or 0
            left = (total - f["member"]) / rate if rate > 0 else None
            times = f"{fmt_seconds(f.get('elapsed'))}" + (f", ~{fmt_seconds(left)} left" if left is not None else "")
            cov = f.get("coverage")
            est = estimate_text(f, self.task) + (f"  coverage {100 * cov:.1f}%" if cov is not None else "")
            self.bar.update(self.task_id, completed=f["member"], estimate=est, times=times)
        self._guard(go)

    def note(self, text: str) -> None:
        self._guard(lambda: self.console.print(text, markup=False, highlight=False))

    def end(self, end: dict) -> None:
        pass

    def close(self) -> None:
        if self.started:
            self._guard(self.bar.stop)
            self.started = False


def make(kind: str, stream=None):
    """'rich' (a terminal) or 'plain' progress."""
    return RichProgress() if kind == "rich" else PlainProgress(stream)


def follow(run_dir, progress, *, is_done=None, poll: float = 0.25, from_start: bool = False) -> dict | None:
    """Feed a run's journal into a progress display until its end line (returned) or is_done() is true.

    from_start: replay the whole journal; otherwise only the latest start and what follows is shown.
    """
    from pathlib import Path

    from baggr.runs.journal import JOURNAL, JournalReader
    reader = JournalReader(Path(run_dir) / JOURNAL)
    backlog = reader.read_new()
    if not from_start:
        starts = [i for i, ev in enumerate(backlog) if ev.get("event") == "start"]
        if starts:
            backlog = backlog[starts[-1]:]
    events = backlog
    while True:
        for ev in events:
            kind = ev.get("event")
            if kind == "start":
                progress.begin(ev)
            elif kind == "member":
                progress.member(ev)
            elif kind == "warning":
                progress.note(f"warning: {ev.get('message')}")
            elif kind == "end":
                progress.end(ev)
                return ev
        if is_done is not None and is_done():
            events = reader.read_new()
            if not events:
                return None
            continue
        time.sleep(poll)
        events = reader.read_new()
