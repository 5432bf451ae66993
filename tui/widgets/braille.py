"""Line plots in braille cells (2 x 4 dots a cell), drawn with numpy.

Why not a plotting package: the one used before built each frame in pure Python, 30-60 ms at
120 x 40 (bench/README.md), and at one frame a second that alone was ~5% of a core taken from the
job on a 2-core server, the largest part of the dashboard's cost to it. This draws the same
frame in about a millisecond. It draws only what the curve panel needs: lines (joined points, a
gap at NaN), a y axis with round ticks, x ticks given by the caller, a mark character per series
instead of dots when there is no colour.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from rich.style import Style
from rich.text import Text

# Unicode braille: dot (column, row) of a cell -> its bit (U+2800 + bits)
DOT_BIT = np.array([[0x01, 0x02, 0x04, 0x40],
                    [0x08, 0x10, 0x20, 0x80]], np.uint8)


@dataclass
class Series:
    xs: np.ndarray          # float, in axis units (already log10 for a log axis)
    ys: np.ndarray          # float; NaN breaks the line
    colour: str | None      # a rich colour, or None (the terminal's own)
    mark: str | None = None # a character per point instead of braille dots (no colour)


def nice_step(span: float, most: int) -> float:
    """A 1, 2 or 5 x 10^k step giving at most `most` intervals over `span`."""
    if not span > 0 or not math.isfinite(span):
        return 1.0
    raw = span / max(1, most)
    e = math.floor(math.log10(raw))
    for m in (1, 2, 5, 10):
        if m * 10 ** e >= raw:
            return m * 10 ** e
    return 10 ** (e + 1)


def y_ticks(lo: float, hi: float, rows: int) -> tuple[list[float], list[str]]:
    """Round ticks between lo and hi, about one every three rows (at least three), labelled with as few decimals as they need."""
    step = nice_step(hi - lo, max(3, rows // 3))
    first = math.ceil(lo / step - 1e-9) * step
    ticks = []
    t = first
    while t <= hi + step * 1e-9:
        ticks.append(t)
        t = first + len(ticks) * step
    decimals = max(0, -math.floor(math.log10(step))) if step < 1 else 0
    return ticks, [f"{t:.{decimals}f}" for t in ticks]


def _segments(px: np.ndarray, py: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Dot coordinates of the lines joining consecutive finite points (no line across a NaN)."""
    ok = np.isfinite(px) & np.isfinite(py)
    if not ok.any():
        return np.empty(0, np.int64), np.empty(0, np.int64)
    pair = ok[:-1] & ok[1:]
    x0, y0, x1, y1 = px[:-1][pair], py[:-1][pair], px[1:][pair], py[1:][pair]
    steps = np.maximum(np.abs(x1 - x0), np.abs(y1 - y0)).astype(np.int64) + 1
    # every segment sampled at `steps` + 1 points: consecutive samples are at most one dot apart
    seg = np.repeat(np.arange(x0.shape[0]), steps + 1)
    start = np.repeat(np.cumsum(steps + 1) - (steps + 1), steps + 1)
    t = (np.arange(seg.shape[0]) - start) / np.repeat(steps, steps + 1)
    xs = np.rint(x0[seg] + (x1 - x0)[seg] * t)
    ys = np.rint(y0[seg] + (y1 - y0)[seg] * t)
    lone = ok.copy()              # finite points with no finite neighbour still show as a dot
    lone[:-1] &= ~pair
    lone[1:] &= ~pair
    xs = np.concatenate([xs, np.rint(px[lone])]).astype(np.int64)
    ys = np.concatenate([ys, np.rint(py[lone])]).astype(np.int64)
    return xs, ys


def plot(series: list[Series], width: int, height: int, **kw) -> Text:
    """The plot as one Text of `height` lines of at most `width` cells (see plot_lines)."""
    out = Text(no_wrap=True, overflow="crop")
    for i, line in enumerate(plot_lines(series, width, height, **kw)):
        if i:
            out.append("\n")
        for text, style in line:
            out.append(text, style)
    return out


def plot_lines(series: list[Series], width: int, height: int, *, x_range: tuple[float, float],
               x_ticks: tuple[list[float], list[str]] = ((), ()), y_range: tuple[float, float] | None = None,
               axis_style: Style | str = "dim") -> list[list[tuple[str, Style | None]]]:
    """The plot as `height` lines of (text, style) runs, each exactly `width` cells (from 3 cells
    up; one cell a character): y labels, the drawing, then the x labels."""
    finite = [s.ys[np.isfinite(s.ys)] for s in series]
    finite = [f for f in finite if f.size]
    if y_range is None:
        if finite:
            lo, hi = float(min(f.min() for f in finite)), float(max(f.max() for f in finite))
        else:
            lo, hi = 0.0, 1.0
        if hi - lo < 1e-12:
            lo, hi = lo - 0.5, hi + 0.5
        pad = (hi - lo) * 0.02
        y_range = (lo - pad, hi + pad)
    rows = max(1, height - 1)                     # the last line holds the x labels
    yt, yl = y_ticks(y_range[0], y_range[1], rows)
    label_w = max((len(s) for s in yl), default=1)
    cols = max(1, width - label_w - 1)
    W, H = 2 * cols, 4 * rows
    x0, x1 = x_range
    xspan = (x1 - x0) or 1.0
    y0, y1 = y_range
    yspan = (y1 - y0) or 1.0

    bits = np.zeros((rows, cols), np.uint8)
    owner = np.full((rows, cols), -1, np.int64)     # the series drawn last in a cell gives its colour
    marks = np.full((rows, cols), -1, np.int64)     # the series whose mark a cell shows (no colour)
    for k, s in enumerate(series):
        # dot coordinates, or cell coordinates for marks (they live on the cell grid)
        w, h = (cols, rows) if s.mark is not None else (W, H)
        px = (np.asarray(s.xs, float) - x0) / xspan * (w - 1)
        py = (y1 - np.asarray(s.ys, float)) / yspan * (h - 1)
        xs, ys = _segments(px, py)
        if s.mark is not None:
            inside = (xs >= 0) & (xs < cols) & (ys >= 0) & (ys < rows)
            marks[ys[inside], xs[inside]] = k
            owner[ys[inside], xs[inside]] = k
            continue
        inside = (xs >= 0) & (xs < W) & (ys >= 0) & (ys < H)
        xs, ys = xs[inside], ys[inside]
        cx, cy = xs >> 1, ys >> 2
        np.bitwise_or.at(bits, (cy, cx), DOT_BIT[xs & 1, ys & 3])
        owner[cy, cx] = k
        marks[cy, cx] = -1

    # which line each y tick labels (the row its value falls in)
    tick_row = {}
    for t, lab in zip(yt, yl):
        r = int(round((y1 - t) / yspan * (H - 1))) >> 2
        if 0 <= r < rows:
            tick_row.setdefault(r, lab)
    styles = [Style(color=s.colour) if s.colour else None for s in series]
    axis = Style.parse(axis_style) if isinstance(axis_style, str) else axis_style
    # one code point a cell: braille from the dot bits, a series' mark, or a space where nothing is drawn
    cp = bits.astype(np.uint32) + 0x2800
    if (marks >= 0).any():
        mark_cp = np.array([ord(s.mark) if s.mark else 0x20 for s in series], np.uint32)
        cp[marks >= 0] = mark_cp[marks[marks >= 0]]
    cp[owner < 0] = 0x20
    lines = []
    for r in range(rows):
        line = [(tick_row.get(r, "").rjust(label_w) + " ", axis)]
        text = cp[r].tobytes().decode("utf-32-le")
        o = owner[r]
        cuts = [0, *(np.flatnonzero(o[1:] != o[:-1]) + 1).tolist(), cols]
        for c, e in zip(cuts, cuts[1:]):    # one run a stretch of cells of the same series
            k = int(o[c])
            line.append((text[c:e], styles[k] if k >= 0 else None))
        lines.append(line)
    lines.append([(x_labels(x_ticks, x0, xspan, cols, label_w + 1).ljust(label_w + 1 + cols), axis)])
    return lines


def x_labels(ticks, x0: float, xspan: float, cols: int, indent: int) -> str:
    """The x labels line: each label centred under its tick's cell, dropped where it would overlap."""
    line = [" "] * (indent + cols)
    free = 0
    for t, lab in zip(*ticks):
        c = indent + int(round((t - x0) / xspan * (cols - 1)))
        start = min(max(c - len(lab) // 2, indent), indent + cols - len(lab))
        if start < free or start < 0:
            continue
        line[start:start + len(lab)] = lab
        free = start + len(lab) + 1
    return "".join(line).rstrip()
