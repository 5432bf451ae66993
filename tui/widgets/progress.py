"""Progress: members done of the target, the job and its process, pace, time, what is saved, coverage."""
from __future__ import annotations

import textwrap

from rich.segment import Segment
from rich.text import Text

from .. import fmt
from ..view import View
from .base import ELLIPSIS, Panel, pair_lines
from .palette import BAR_DONE, BAR_LEFT, STATUS_STYLE, rgb
from .process import ProcessFigures, process_parts
from .texttable import bar

KEEP = "\u00a0"           # a space that wrap() never breaks at
LABEL = 7               # the label column (pair_lines), and one space after it
WIDTH = 30              # the panel's content width until the layout says (the side column's)


def wrap(words: str, width: int, most: int = 3) -> list[str]:
    """`words` over at most `most` lines of `width`, broken between words (a number is never cut;
    KEEP joins two words for good, as in "pid" and its number); what does not fit ends at a word with an ellipsis."""
    width = max(8, width)
    lines = [x.replace(KEEP, " ") for x in textwrap.wrap(words, width, break_on_hyphens=False)] or [""]
    if len(lines) <= most:
        return lines
    last = lines[most - 1]
    while last and len(last) + 2 > width:
        last = last.rsplit(" ", 1)[0] if " " in last else last[: width - 2]
    return lines[: most - 1] + [last + " " + ELLIPSIS]


# the measures' names short enough for the panel's label column
SHORT = {"error": "error", "balanced-error": "bal.err", "log-loss": "log loss", "brier": "Brier", "auc": "AUC",
         "mse": "MSE", "rmse": "RMSE", "mae": "MAE", "r2": "R2"}


def fit_parts(parts: list[str], width: int, sep: str = " · ") -> str:
    """As many of `parts` (most telling first) as fit in `width`, joined."""
    out = ""
    for p in parts:
        nxt = p if not out else out + sep + p
        if len(nxt) > width:
            break
        out = nxt
    return out


def job_lines(v: View, proc: ProcessFigures | None, width: int) -> list[Text]:
    """The job's status in words (the reason wrapped, never cut mid-number) and, while it runs, its
    process on the next line: pid, then CPU, memory and threads as the width allows."""
    status = v.status
    words = status
    pid = v.pid if proc is None else proc.pid
    if status == "running":
        if pid is not None:
            words += f" · pid{KEEP}{pid}"
        if v.stop_requested:
            words += ", stop asked"
        elif v.quiet_for is not None and v.quiet_for > 60:
            words += f", quiet {fmt.duration(v.quiet_for)}"
    elif status == "crashed":
        words += ": no end line" + (f" (pid{KEEP}{pid}{KEEP}gone)" if pid is not None else "")
    elif v.reason:
        words += f": {v.reason}"
    lines = [Text(x) for x in wrap(words, width)]
    lines[0].stylize(STATUS_STYLE.get(status, ""), 0, len(status))
    if status == "running" and proc is not None:
        line = fit_parts(process_parts(proc), width)
        if line:
            lines.append(Text(line))
    return lines


def saved_words(v: View) -> str:
    """What a resume or a score can count on once the job has ended."""
    if v.status in ("finished", "stopped") and v.members and "without saving" not in (v.reason or ""):
        # the job saves the model of every member at a finish or a clean stop (baggr/runs/job.py);
        # a second signal quits "without saving" and leaves the last checkpoint
        return f"model at {v.members:,} members"
    return "nothing yet" if v.last_checkpoint is None else f"checkpoint at {v.last_checkpoint:,}"


def progress_lines(v: View, proc: ProcessFigures | None = None, width: int = WIDTH) -> list[tuple]:
    """The panel's figures as (label, value) rows; a value wider than the panel goes on over more rows."""
    room = max(8, width - LABEL - 1)
    target = v.members_target
    done = Text(f"{v.members:,}", style="bold")
    if target:
        done.append(f" of {target:,}  {100 * v.members / target:.0f}%")
    rows = [("members", done)]
    if target:
        rows.append(("", bar(min(v.members, target), target, min(room, 21), rgb(BAR_DONE), rgb(BAR_LEFT))))
    for i, line in enumerate(job_lines(v, proc, room)):
        rows.append(("job" if i == 0 else "", line))
    rows.append(("pace", fmt.pace(v.rate)))
    rows.append(("elapsed", fmt.duration(v.elapsed)))
    if v.status == "running":
        rows.append(("to go", "-" if v.eta is None else "about " + fmt.duration(v.eta)))
    elif v.status != "waiting":
        rows.append(("saved", saved_words(v)))
    rows.append(("covered", "-" if v.coverage is None else f"{fmt.pct(v.coverage)} of rows"))
    if v.measure and v.measure_value is not None and v.measure_value[0] == v.measure_value[0]:
        val, lo, hi = v.measure_value
        rate = v.measure in ("error", "balanced-error")      # shares of rows: as percentages, like the error
        text = Text(fmt.pct(val) if rate else f"{val:.4g}", style="bold" if v.measure == v.chosen_measure else "")
        if lo == lo and hi == hi:
            text.append(f" ({fmt.pct(lo)}-{fmt.pct(hi)})" if rate else f" ({lo:.3g}-{hi:.3g})")
        rows.append((SHORT.get(v.measure, v.measure), text))
    return rows


class ProgressPanel(Panel):
    """How far the job has come, and its process."""

    DEFAULT_CSS = """
    ProgressPanel {
        height: auto;
        padding: 0 1;
    }
    """

    _last = None

    def on_resize(self) -> None:
        if self._last is not None:        # the rows are wrapped to the width: lay them out again
            self.show(*self._last)

    def show(self, v: View, proc: ProcessFigures | None = None) -> None:
        self._last = (v, proc)
        width = self.content_size.width or WIDTH
        rows = progress_lines(v, proc, width)
        key = tuple((k, val.plain if isinstance(val, Text) else val) for k, val in rows) + (v.unreadable, width)

        def make():
            # twice a second: segments straight from the rows (no Text built and cut again)
            get_style = self.app.console.get_style
            lines = pair_lines(rows, get_style, label_width=LABEL)
            if v.unreadable:
                lines.append([Segment(f"{v.unreadable} journal line(s) unreadable", get_style("dim"))])
            return lines
        self.put_lines(key, make, lines=len(rows) + bool(v.unreadable))
