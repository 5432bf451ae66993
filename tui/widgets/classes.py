"""Per class: rows, share, OOB error and its Wilson 95% interval."""
from __future__ import annotations

from rich.text import Text

from .. import fmt
from ..view import View
from .base import Panel
from .texttable import table_width, text_table
from .palette import class_colour, class_mark, rgb

COLUMNS = ("class", "rows", "share", "OOB error", "95% interval", "covered")
NARROW = COLUMNS[:-1]        # when the full table does not fit, the covered count makes way first
NARROWEST = ("class", "rows", "OOB error", "95% interval")


def class_rows(v: View) -> list[tuple]:
    """Table rows: "all" first, then one per class (cells as plain strings)."""
    out = [("all", fmt.count(v.rows), "100%", fmt.pct(v.error, 2), fmt.span(v.interval, True),
            fmt.count(sum(sum(r) for r in v.confusion)) if v.confusion else "-")]
    for f in v.class_figures:
        out.append((f["name"], fmt.count(f["rows"]), fmt.pct(f["share"]), fmt.pct(f["error"], 2),
                    fmt.span(f["interval"], True), fmt.count(f["covered"])))
    return out


def window(n: int, room: int, keep: int | None) -> range:
    """Which of n class rows to show in `room` lines, keeping row `keep` in view."""
    if n <= room:
        return range(n)
    start = 0 if keep is None else min(max(0, keep - room // 2), n - room)
    return range(start, start + room)


def class_table(v: View, narrow: bool, mono: bool, room: int = 1000, cols=None) -> Text:
    body, styles, cols = class_cells(v, narrow, mono, room, cols)
    return text_table(body, header=list(cols), gap=2, row_styles=styles)


def class_cells(v: View, narrow: bool, mono: bool, room: int = 1000, cols=None) -> tuple[list, list, tuple]:
    """The table's body rows, their styles and its columns."""
    cols = cols or (NARROW if narrow else COLUMNS)
    rows = class_rows(v)
    shown = window(len(rows) - 1, max(1, room - 2), v.highlight)   # the header and "all" take two lines
    body, styles = [], []
    for i in [0] + [k + 1 for k in shown]:
        r = rows[i]
        if i == 0:
            label = Text.assemble("  " if mono else "   ", (r[0], "bold"))
        elif mono:
            label = Text.assemble((class_mark(i - 1) + " ", "bold"), r[0])
        else:
            label = Text.assemble(("━━ ", rgb(class_colour(i - 1))), r[0])
        styles.append("reverse" if v.highlight is not None and i == v.highlight + 1 else "")
        body.append([label, *(r[COLUMNS.index(c)] for c in cols[1:])])
    return body, styles, cols


class ClassPanel(Panel):
    """The per-class table; the highlighted class is shown reversed and kept in view."""

    DEFAULT_CSS = """
    ClassPanel {
        height: auto;
        padding: 0 1;
    }
    """

    def on_mount(self) -> None:
        self.parent.border_title = "by class"

    _last = None
    hidden = 0              # class rows left out for want of room (the `c` key's caption says so)

    def on_resize(self) -> None:
        # Which columns fit depends on the width the layout gave: fit again once it is known.
        if self._last is not None:
            self.show(*self._last)

    def show(self, v: View, narrow: bool = False, room: int = 1000) -> None:
        self._last = (v, narrow, room)
        mono = self.app.no_color
        n = len(v.class_figures)
        key = (tuple(class_rows(v)), narrow, mono, room, v.highlight, self.content_size.width)
        self.hidden = max(0, n - max(1, room - 2))
        self.put(key, lambda: self._fitting(v, narrow, mono, room), lines=min(n + 2, room))

    def _fitting(self, v: View, narrow: bool, mono: bool, room: int) -> Text:
        """The widest column set whose table fits the panel (cells are never cut short)."""
        avail = self.content_size.width
        for cols in (COLUMNS, NARROW, NARROWEST):
            body, styles, cols = class_cells(v, narrow, mono, room, cols)
            if avail <= 0 or table_width(body, list(cols), gap=2) <= avail:
                break
        return text_table(body, header=list(cols), gap=2, row_styles=styles)
