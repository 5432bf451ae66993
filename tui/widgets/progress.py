"""Progress: members done of the target, pace, time, coverage and the headline OOB figure."""
from __future__ import annotations

from rich.segment import Segment
from rich.text import Text

from .. import fmt
from ..view import View
from .base import Panel, pair_lines
from .texttable import bar
from .palette import BAR_DONE, BAR_LEFT, STATUS_STYLE, rgb


STATUS_SHORT = {
    "waiting": "waiting",
    "running": "running",
    "finished": "finished",
    "stopped": "stopped",
    "failed": "failed",
    "crashed": "crashed",
}


def progress_lines(v: View) -> list[tuple]:
    """The panel's figures as (label, value) rows."""
    target = v.members_target
    done = Text(f"{v.members:,}", style="bold")
    if target:
        done.append(f" of {target:,}  {100 * v.members / target:.0f}%")
    rows = [("members", done)]
    if target:
        rows.append(("", bar(min(v.members, target), target, 21, rgb(BAR_DONE), rgb(BAR_LEFT))))
    rows.append(("job", job_words(v)))
    rows.append(("pace", "-" if not v.rate else f"{v.rate:.3g} members/s"))
    rows.append(("elapsed", fmt.duration(v.elapsed)))
    if v.status == "running":
        rows.append(("to go", "-" if v.eta is None else "about " + fmt.duration(v.eta)))
    else:
        rows.append(("saved", "-" if v.last_checkpoint is None else f"checkpoint at {v.last_checkpoint:,}"))
    rows.append(("covered", "-" if v.coverage is None else f"{fmt.pct(v.coverage)} of rows"))
    return rows


def job_words(v: View) -> Text:
    """The job's status in a few words."""
    style = STATUS_STYLE.get(v.status, "")
    t = Text(STATUS_SHORT.get(v.status, v.status), style=style)
    if v.status == "running":
        if v.stop_requested:
            t.append(", stop asked", style="italic")
        elif v.quiet_for is not None and v.quiet_for > 60:
            t.append(f", quiet {fmt.duration(v.quiet_for)}", style="italic")
    elif v.status == "crashed":
        t.append(": no end line", style="")
    elif v.reason:
        t.append(f": {v.reason}", style="")
    return t


class ProgressPanel(Panel):
    """How far the job has come."""

    DEFAULT_CSS = """
    ProgressPanel {
        height: auto;
        padding: 0 1;
    }
    """

    def show(self, v: View) -> None:
        rows = progress_lines(v)
        key = tuple((k, val.plain if isinstance(val, Text) else val) for k, val in rows) + (v.unreadable,)

        def make():
            # twice a second: segments straight from the rows (no Text built and cut again)
            get_style = self.app.console.get_style
            lines = pair_lines(rows, get_style)
            if v.unreadable:
                lines.append([Segment(f"{v.unreadable} journal line(s) unreadable", get_style("dim"))])
            return lines
        self.put_lines(key, make, lines=len(rows) + bool(v.unreadable))
