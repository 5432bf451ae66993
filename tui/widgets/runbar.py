"""The top line: which run this is, what it learns, and how the job stands."""
from __future__ import annotations

from rich.text import Text

from ..view import View
from .base import Panel
from .palette import STATUS_STYLE

STATUS_WORDS = {
    "waiting": "waiting for the job's first line",
    "running": "running",
    "finished": "finished",
    "stopped": "stopped on request",
    "failed": "failed",
    "crashed": "crashed: process gone, no end line",
}


def task_words(v: View) -> str:
    if v.task is None:
        return "no start line yet"
    shape = f"{v.rows:,} rows · {v.features} features" if v.rows is not None and v.features is not None else ""
    if v.task == "regression":
        what = "regression"
    else:
        what = f"{len(v.classes)} classes"
    return f"{what} · {shape}" if shape else what


class RunBar(Panel):
    """One line naming the run and its status, and the keys that act on the whole dashboard."""

    DEFAULT_CSS = """
    RunBar {
        height: 1;
        padding: 0 1;
        background: $panel;
        color: $text;
    }
    """

    _view = None
    _keys: tuple = ()

    def show(self, v: View, keys=()) -> None:
        """keys: (label, words) of the keys captioned here (tui/keys.py)."""
        self._view, self._keys = v, tuple(keys)
        width = self.content_region.width
        self.put((v.run_name, task_words(v), v.status, v.stop_requested, width, self._keys),
                 lambda: self._line(v, width, self._keys), lines=1)

    def on_resize(self) -> None:
        if self._view is not None:          # the status sits at the right edge: place it again
            self.show(self._view, self._keys)

    def reading(self, run_name: str, lines: int) -> None:
        """While the opening read runs."""
        words = f"  reading the journal: {lines:,} lines" if lines else "  reading the journal..."
        self.put(("reading", lines), lambda: Text.assemble(("baggr", "dim"), "  ", (run_name, "bold"), words),
                 lines=1)

    def _line(self, v: View, width: int, keys=()) -> Text:
        """The run on the left, its status and the keys at the right edge; the left part gives way first."""
        left = Text.assemble(("baggr", "dim"), ("  ", ""), (v.run_name, "bold"), ("  ", ""), (task_words(v), ""))
        words = STATUS_WORDS.get(v.status, v.status)
        if v.status == "running" and v.stop_requested:
            words = "running, stop requested"
        right = Text(words, style=STATUS_STYLE.get(v.status, ""))
        tail = Text()
        for label, what in keys:
            tail.append("   " if not tail else "  ")
            tail.append(label, style="bold")
            tail.append(" " + what, style="dim")
        if len(right) + len(tail) <= width:
            right.append_text(tail)
        room = width - len(right) - 1
        if room < 8:
            return right
        if len(left) > room:
            left.truncate(room, overflow="ellipsis")
        left.append(" " * (width - len(left) - len(right)))
        return left + right
