"""Progress: members done of the target, pace, time, coverage and the headline OOB figure."""
from __future__ import annotations

from rich.console import Group
from rich.progress_bar import ProgressBar
from rich.table import Table
from rich.text import Text

from .. import fmt
from ..view import View
from .base import Panel
from .palette import BAR_DONE, BAR_LEFT, STATUS_STYLE, rgb


STATUS_SHORT = {
    "waiting": "waiting",
    "running": "running",
    "finished": "finished",
    "stopped": "stopped",
    "failed": "failed",
    "crashed": "crashed",
}


def progress_lines(v: View) -> Table:
    """The panel's figures as a two-column grid (label, value)."""
    g = Table.grid(padding=(0, 1, 0, 0))
    g.add_column(style="dim", no_wrap=True, min_width=7)
    g.add_column(no_wrap=True, overflow="ellipsis")
    target = v.members_target
    done = Text(f"{v.members:,}", style="bold")
    if target:
        done.append(f" of {target:,}  {100 * v.members / target:.0f}%")
    g.add_row("members", done)
    if target:
        g.add_row("", ProgressBar(total=target, completed=min(v.members, target), width=21,
                                  style=rgb(BAR_LEFT), complete_style=rgb(BAR_DONE), finished_style=rgb(BAR_DONE)))
    g.add_row("job", job_words(v))
    g.add_row("pace", "-" if not v.rate else f"{v.rate:.3g} members/s")
    g.add_row("elapsed", fmt.duration(v.elapsed))
    if v.status == "running":
        g.add_row("to go", "-" if v.eta is None else "about " + fmt.duration(v.eta))
    else:
        g.add_row("saved", "-" if v.last_checkpoint is None else f"checkpoint at {v.last_checkpoint:,}")
    g.add_row("covered", "-" if v.coverage is None else f"{fmt.pct(v.coverage)} of rows")
    return g


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
        def make():
            grid = progress_lines(v)
            if v.unreadable:
                return Group(grid, Text(f"{v.unreadable} journal line(s) unreadable", style="dim"))
            return grid
        grid = progress_lines(v)
        key = _plain(grid) + (v.unreadable,)
        self.put(key, make, lines=grid.row_count + bool(v.unreadable))


def _plain(grid: Table) -> tuple:
    """What a grid says, as plain strings (its progress bar by its figures)."""
    out = []
    for col in grid.columns:
        for cell in col.cells:
            if isinstance(cell, ProgressBar):
                out.append((cell.total, cell.completed))
            else:
                out.append(cell.plain if isinstance(cell, Text) else str(cell))
    return tuple(out)
