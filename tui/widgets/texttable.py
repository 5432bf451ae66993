"""Aligned columns as one rich Text: the panels' tables without a table layout pass.

Why not rich's Table: it measures and renders every cell on every repaint, and with the figures
changing at each redraw the class table, the matrix and the two grids cost about 9% of a core at
2 redraws a second (bench/README.md), taken from the job next to it on a 2-core server. The
columns here are sized from the cells' lengths once, when the text is made.
"""
from __future__ import annotations

from rich.cells import cell_len
from rich.text import Text


def width(cell) -> int:
    return cell_len(cell.plain if isinstance(cell, Text) else str(cell))


def text_table(rows, *, header=None, justify=None, gap: int = 1, header_style: str = "dim",
               col_styles=None, row_styles=None, min_widths=None) -> Text:
    """rows: lists of cells (str or Text); justify: "left"/"right" per column (first left, others right
    by default); row_styles: a style per row (or ""), laid over the whole line."""
    all_rows = ([header] if header else []) + [list(r) for r in rows]
    if not all_rows:
        return Text("")
    widths = column_widths(all_rows)
    n = len(widths)
    if min_widths:
        widths = [max(w, m) for w, m in zip(widths, list(min_widths) + [0] * n)]
    justify = justify or ["left"] + ["right"] * (n - 1)
    out = Text(no_wrap=True, overflow="ellipsis")
    for i, r in enumerate(all_rows):
        start = len(out)
        for j in range(n):
            c = r[j] if j < len(r) else ""
            pad = widths[j] - width(c)
            if j:
                out.append(" " * gap)
            if justify[j] == "right":
                out.append(" " * pad)
            style = header_style if (header and i == 0) else (col_styles[j] if col_styles and j < len(col_styles) else "")
            if isinstance(c, Text):
                piece = c.copy()
                if style:
                    piece.stylize(style, 0, len(piece))
                out.append_text(piece)
            else:
                out.append(str(c), style or None)
            if justify[j] != "right" and j < n - 1:
                out.append(" " * pad)
        k = i - (1 if header else 0)
        if row_styles and 0 <= k < len(row_styles) and row_styles[k]:
            out.stylize(row_styles[k], start, len(out))
        if i < len(all_rows) - 1:
            out.append("\n")
    return out


def column_widths(all_rows) -> list[int]:
    """The widest cell of each column."""
    n = max((len(r) for r in all_rows), default=0)
    return [max((width(r[j]) for r in all_rows if j < len(r)), default=0) for j in range(n)]


def table_width(rows, header=None, gap: int = 1) -> int:
    """Columns text_table would take."""
    widths = column_widths(([header] if header else []) + [list(r) for r in rows])
    return sum(widths) + gap * max(0, len(widths) - 1)


def pairs(rows, *, label_width: int = 7, gap: int = 1) -> Text:
    """Label / value lines: labels dim in a column of at least `label_width`, values as given."""
    return text_table(rows, justify=["left", "left"], gap=gap, col_styles=["dim", ""], min_widths=[label_width])


def bar(done: int, total: int, width: int, done_style: str, left_style: str) -> Text:
    """A one-line progress bar of `width` cells (heavy line done, light rest)."""
    full = 0 if total <= 0 else min(width, int(width * done / total))
    t = Text("━" * full, style=done_style)
    if full < width:
        t.append("╺" + "━" * (width - full - 1), style=left_style)
    return t
