"""Progress of a training job: a rich progress bar on a terminal, plain lines otherwise (logs, nohup, pipes).

Both take the journal's own fields (start, member, end), so a job in this process and a detached one
followed through its journal look the same.
"""
from __future__ import annotations

import sys
import time

from baggr.runs import fmt_seconds
from baggr.units import count, pace, percent, percent_span, value, value_span


def error_words(fields: dict, task: str | None) -> tuple[str, str]:
    """('OOB error 13.88%', '(95% 12.1-15.6%)'): the headline figure and its interval from a member line
    (an MSE and its interval for regression); the interval '' when unknown."""
    regression = task == "regression"
    what = "OOB MSE" if regression else "OOB error"
    err, iv = fields.get("error"), fields.get("interval")
    if err is None:
        return f"{what} -", ""
    head = f"{what} {value(err) if regression else percent(err)}"
    if not iv or iv[0] is None or iv[1] is None:
        return head, ""
    return head, f"(95% {value_span(iv) if regression else percent_span(iv)})"


def estimate_text(fields: dict, task: str | None) -> str:
    """'OOB error 13.88% (95% 12.1-15.6%)' (or the MSE and R2 for regression) from a member line."""
    head, iv = error_words(fields, task)
    if fields.get("error") is None:
        return head + " (no row left out yet)"
    text = f"{head} {iv}" if iv else head
    if task == "regression" and fields.get("r2") is not None:
        text += f"  R2 {fields['r2']:.3f}"
    return text


def measure_of(start: dict) -> str | None:
    """The measure a job is judged by (`--measure`), from its start line; None for the error (or the
    MSE), which the lines show anyway."""
    from baggr.runs.measure_points import chosen
    config = start.get("config") if isinstance(start.get("config"), dict) else {}
    name = chosen(config, start.get("task"))
    return None if name in ("error", "mse") else name


def measure_words(name: str, point) -> str:
    """'AUC 0.9483 (95% 0.9403-0.9563)' from a member line's measures entry [value, lo, hi]."""
    from baggr.runs.measure_points import LABELS

    def num(v):
        if name == "balanced-error":
            return percent(v)
        return value(v) if name in ("mae", "rmse") else ("-" if v is None else f"{v:.4f}")
    v, lo, hi = (list(point) + [None, None, None])[:3]
    text = f"{LABELS.get(name, name)} {num(v)}"
    if lo is not None and hi is not None:
        text += f" (95% {percent_span((lo, hi)) if name == 'balanced-error' else f'{num(lo)}-{num(hi)}'})"
    return text


def time_left(f: dict, target) -> float | None:
    """Seconds to the target at the latest pace; None when unknown or done."""
    rate, m = f.get("rate") or 0.0, f.get("member", 0)
    return (target - m) / rate if rate > 0 and target and m < target else None


class PlainProgress:
    """One line per `every` members or per `seconds`, and the first and last: reads well in `tail -f`."""

    def __init__(self, stream=None, seconds: float = 10.0, get_time=time.monotonic):
        self.stream = stream or sys.stdout
        self.seconds, self.get_time = seconds, get_time
        self.task, self.target, self.every, self.first = None, None, 10, 0
        self.last_member, self.last_t = None, None
        self.pending = None
        self.dead = False
        self.measure, self.measured = None, None    # the chosen measure; its latest (member, [v, lo, hi])

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
        self.measure = measure_of(start)
        from baggr.runs.measure_points import LABELS
        judged = f", judged by {LABELS.get(self.measure, self.measure)}" if self.measure else ""
        self._say(f"{verb}: {self.target} members on {start.get('rows')} rows x {start.get('features')} features "
                  f"({what}), {start.get('threads')} threads{judged}")

    def line(self, f: dict) -> str:
        m, target = f.get("member"), self.target or 0
        width = len(str(target)) if target else 1
        pct = f"{100.0 * m / target:3.0f}%" if target else ""
        left = time_left(f, target)
        cov = f.get("coverage")
        parts = [f"member {m:>{width}}/{target} {pct}", estimate_text(f, self.task), self._measure_text(m),
                 f"coverage {percent(cov, 1)}", pace(f.get("rate")) if f.get("rate") else "",
                 f"elapsed {fmt_seconds(f.get('elapsed'))}", f"left ~{fmt_seconds(left)}" if left is not None else ""]
        return "  ".join(p for p in parts if p)

    def _measure_text(self, m: int) -> str:
        """The chosen measure at its latest point (computed at log-spaced sizes: 'at N' when older)."""
        if self.measure is None or self.measured is None:
            return ""
        at, point = self.measured
        return measure_words(self.measure, point) + (f" at {at} members" if at != m else "")

    def member(self, f: dict) -> None:
        now = self.get_time()
        m = f.get("member", 0)
        got = f.get("measures")
        if self.measure and isinstance(got, dict) and got.get(self.measure) is not None:
            self.measured = (m, got[self.measure])
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


# The one-line progress of a job on a terminal. Each field has a rank: on a narrow terminal the
# highest ranks drop first, so members done and the error are the last to go; the bar takes
# what is left, between BAR_MOST and BAR_LEAST cells (none when even BAR_LEAST does not fit).
BAR = object()
BAR_LEAST, BAR_MOST = 8, 40
BAR_DONE, BAR_LEFT = "rgb(112,162,212)", "rgb(58,64,72)"   # the dashboard's bar colours (tui/widgets/palette.py)


def line_parts(f: dict | None, task, target, verb: str) -> list[tuple[int, str, object, str]]:
    """The fields of the progress line in the order shown: (rank, separator before, text or BAR, style)."""
    f = f or {}
    m = f.get("member", 0)
    head, iv = error_words(f, task) if f.get("member") is not None else (
        ("OOB MSE -" if task == "regression" else "OOB error -"), "")
    left = time_left(f, target)
    cov = f.get("coverage")
    parts = [
        (9, "", verb, "bold"),
        (2, " ", BAR, ""),
        (0, " ", f"{count(m)}/{count(target)}" if target else count(m), "bold"),
        (5, " ", f"{100 * m / target:.0f}%" if target else "", ""),
        (1, "  ", head, "bold"),
        (4, " ", iv, ""),
        (6, "  ", f"R2 {f['r2']:.3f}" if task == "regression" and f.get("r2") is not None else "", ""),
        (10, "  ", f"coverage {percent(cov, 1)}" if cov is not None else "", ""),
        (8, "  ", pace(f.get("rate")) if f.get("rate") else "", ""),
        (7, "  ", f"elapsed {fmt_seconds(f.get('elapsed'))}" if f.get("elapsed") is not None else "", ""),
        (3, "  ", f"~{fmt_seconds(left)} left" if left is not None else "", ""),
    ]
    return [p for p in parts if p[2] is BAR or p[2]]


def fit_line(parts, width: int, done: float):
    """The parts that fit in `width` cells (by rank), as a rich Text; `done` (0..1) fills the bar."""
    from rich.cells import cell_len
    from rich.text import Text

    def cells(keep) -> int:
        """Width of the kept parts in the order shown (the first shown has no separator before it)."""
        shown = sorted(keep)
        return sum((BAR_LEAST if parts[i][2] is BAR else cell_len(parts[i][2])) + (len(parts[i][1]) if n else 0)
                   for n, i in enumerate(shown))
    kept, used = set(), 0
    for i in sorted(range(len(parts)), key=lambda i: parts[i][0]):
        need = cells(kept | {i})
        if need > width:
            break                   # strictly by rank: a field never shows while a more important one is gone
        kept.add(i)
        used = need
    out = Text(no_wrap=True, overflow="crop", end="")
    first = True
    for i, (_, sep, text, style) in enumerate(parts):
        if i not in kept:
            continue
        if not first:
            out.append(sep)
        first = False
        if text is BAR:
            n = min(BAR_MOST, BAR_LEAST + width - used)
            full = min(n, int(n * max(0.0, min(1.0, done))))
            out.append("━" * full, style=BAR_DONE)
            if full < n:
                out.append("╺" + "━" * (n - full - 1), style=BAR_LEFT)
        else:
            out.append(text, style=style or None)
    return out


class ProgressLine:
    """A rich renderable: the latest member line laid out to the width it is given, at each refresh."""

    def __init__(self):
        self.fields: dict | None = None     # replaced whole by the job's thread, read by the refresh
        self.task = None
        self.target = None
        self.verb = "training"

    def __rich_console__(self, console, options):
        f, target = self.fields, self.target
        done = (f or {}).get("member", 0) / target if target else 0.0
        yield fit_line(line_parts(f, self.task, target, self.verb), options.max_width, done)


class RichProgress:
    """A live progress line with the running OOB estimate, for a terminal; it fits any width (fit_line)."""

    def __init__(self, console=None):
        from rich.console import Console
        from rich.live import Live
        self.console = console or Console()
        self.view = ProgressLine()
        self.live = Live(self.view, console=self.console, refresh_per_second=4, transient=False)
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
            v = self.view
            v.task, v.target = start.get("task"), start.get("members_target")
            v.verb = "resuming" if start.get("resumed") else "training"
            v.fields = {"member": start.get("first_member", 0) or 0}
            if not self.started:
                self.live.start()
                self.started = True
            self.live.refresh()
        self._guard(go)

    def member(self, f: dict) -> None:
        self.view.fields = f

    def note(self, text: str) -> None:
        self._guard(lambda: self.console.print(text, markup=False, highlight=False))

    def end(self, end: dict) -> None:
        pass

    def close(self) -> None:
        if self.started:
            self._guard(self.live.stop)
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
