"""The confusion matrix of the OOB votes: true class down, voted class across, counts and row shares."""
from __future__ import annotations

from rich.text import Text

from ..view import View
from .base import Panel
from .texttable import text_table


def short(name: str, n: int = 8) -> str:
    return name if len(name) <= n else name[: n - 1] + "~"


def needed_width(v: View, shares: bool) -> int:
    """Columns the matrix takes, frame included."""
    conf = v.confusion or []
    names = [short(c) for c in v.classes] or ["true"]
    cell = max([len(f"{c:,}") for row in conf for c in row] + [1]) + (5 if shares else 0)
    cell = max(cell, max(len(n) for n in names))
    return max(4, max(len(n) for n in names)) + 2 + len(conf) * (cell + 2) + 2


def confusion_table(v: View, room: int = 1000) -> Text:
    """The matrix as aligned text; row shares beside the counts when `room` columns allow."""
    conf = v.confusion
    if not conf:
        return Text("no OOB votes yet", style="italic")
    k = len(conf)
    wide = needed_width(v, True) <= room
    header = ["true"] + [short(v.classes[j] if j < len(v.classes) else str(j)) for j in range(k)]
    body = []
    for i, row in enumerate(conf):
        total = sum(row)
        cells = []
        for j, c in enumerate(row):
            share = c / total if total else 0.0
            txt = f"{c:,}"
            if wide:
                txt += f" {100 * share:3.0f}%"
            cells.append(Text(txt, style="bold") if i == j else txt)
        name = v.classes[i] if i < len(v.classes) else str(i)
        style = "reverse" if v.highlight == i else ""
        body.append([Text(short(name), style=("dim " + style).strip()), *cells])
    return text_table(body, header=header, gap=2)


class ConfusionPanel(Panel):
    """Counts of OOB votes by true class (rows) and voted class (columns), with row shares."""

    DEFAULT_CSS = """
    ConfusionPanel {
        height: auto;
        width: auto;
        padding: 0 1;
    }
    """

    def on_mount(self) -> None:
        self.parent.border_title = "confusion"

    def show(self, v: View, room: int = 1000) -> None:
        wide = bool(v.confusion) and needed_width(v, True) <= room
        key = (str(v.confusion), tuple(v.classes), v.highlight, wide)
        if self.put(key, lambda: confusion_table(v, room), lines=len(v.confusion or ()) + 1):
            subtitle = "" if not v.confusion else ("true class by OOB vote, row %" if wide else "true by vote")
            if self.parent.border_subtitle != subtitle:      # setting it repaints the frame
                self.parent.border_subtitle = subtitle
