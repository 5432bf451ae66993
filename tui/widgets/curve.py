"""The error by ensemble size: the estimated error of the kept ensemble (all rows, each class) with
its 95% band, the textbook OOB curve faintly beside it, the error limit and the members needed."""
from __future__ import annotations

import math

import numpy as np
from rich.segment import Segment
from rich.style import Style
from rich.text import Text
from textual.app import ComposeResult

from ..view import View
from .base import Column, Painted, Panel, TextPanel
from .braille import Series, plot_lines
from .palette import (BAND, DIMMED, LIMIT, MONO_BAND, MONO_DIMMED, MONO_DIMMED_KEY, MONO_LIMIT, MONO_OVERALL,
                      MONO_RAW, OVERALL, RAW, class_colour, class_mark, rgb)

# About e^-1 = 0.368 of the members leave a given row out of their bootstrap draw (Breiman 1996).
OOB_SHARE = math.exp(-1)


def caution(v: View, room: int = 1000) -> str:
    """What the curves are: each row is judged by only ~0.37 x members trees, so the textbook OOB
    curve reads high; the bright curve is corrected to the kept ensemble's size (with the present
    count of judging trees when it fits on the line)."""
    cite = "(Bylander 2002; Janitza & Hornung 2018)"
    judged = OOB_SHARE * v.members
    now = f" (now ~{judged:,.0f})"
    if v.fit is None:
        tail = "the estimate for the kept ensemble comes at 32 members."
    else:
        tail = ("the bright curve estimates the kept ensemble's error at each size (refitted as members "
                "double; the saved ensemble's own at the end).")
    long = (f"Each row is judged by only ~0.37 x members trees{now}, so the textbook OOB error (faint) reads "
            f"high {cite}; {tail}")
    if len(long) <= room:
        return long
    return f"Each row is judged by only ~0.37 x members trees: the textbook OOB error (faint) reads high {cite}; {tail}"


def nice_ticks(lo: float, hi: float, most: int = 6) -> list[int]:
    """Whole-number ticks 1, 2 or 5 x 10^k apart between lo and hi, at most about `most` of them."""
    span = max(hi - lo, 1)
    steps = (m * 10 ** e for e in range(0, 15) for m in (1, 2, 5))
    step = next(st for st in steps if span / st <= max(1, most - 1))
    first = int(math.ceil(lo / step) * step)
    ticks = list(range(first, int(hi) + 1, step))
    ticks = [t for t in ticks if t >= lo]
    if lo <= 1 and (not ticks or ticks[0] - 1 >= step / 2):
        ticks.insert(0, 1)             # the first member is where every curve starts
    return ticks or [int(lo)]


def log_ticks(lo: float, hi: float, width: int = 80) -> tuple[list[float], list[str]]:
    """Ticks for a log10 member axis between members lo and hi: 1, 10, 100 ... (and 2, 5 where there is room)."""
    decades = math.log10(max(hi, 1)) - math.log10(max(lo, 1))
    steps = (1, 2, 5) if decades * 3 * 6 <= width else (1,)
    ticks, labels = [], []
    for e in range(int(math.floor(math.log10(max(lo, 1)))), int(math.ceil(math.log10(max(hi, 1)))) + 1):
        for s in steps:
            x = s * 10 ** e
            if lo <= x <= hi:
                ticks.append(math.log10(x))
                labels.append(f"{x:,}" if x < 10_000 else f"{x // 1000:,}k")
    return ticks, labels


class CurvePlot(Painted):
    """The plot itself (braille lines from .braille)."""

    DEFAULT_CSS = """
    CurvePlot {
        height: 1fr;
        min-height: 5;
    }
    """

    _drawn = None          # the key of the data last drawn
    _last_args = None

    def draw(self, v: View, mono: bool) -> None:
        """Plot the view's curves unless they are drawn already (the app decides how often to ask)."""
        self._last_args = (v, mono)
        key = (v.version, v.log_x, v.highlight, mono, v.task, tuple(v.classes), v.measure, v.show_raw)
        if key == self._drawn:
            return
        self._drawn = key
        self.changed()

    def paint(self, width: int, height: int) -> list[list[Segment]]:
        # The ticks are laid out for the size: a resize paints again from the last view.
        if self._last_args is None or width < 8 or height < 3:
            return []
        v, mono = self._last_args
        lines = []
        for ln in render_curves(v, mono, width, height):
            segs = [Segment(t, st) for t, st in ln]
            n = sum(len(t) for t, _ in ln)     # one cell a character (braille, marks, labels)
            if n < width:
                segs.append(Segment(" " * (width - n)))
            lines.append(segs)
        return lines


def x_top(v: View) -> float:
    """The member axis runs to the members so far, or on to members_needed when that is near
    enough (within 2x, or any distance on a log axis)."""
    return _top(v.members, v.members_needed if v.fit is not None else None, v.log_x)


def _top(members: int, need: int | None, log_x: bool) -> float:
    top = float(max(members, 2))
    if need and need > top and (log_x or need <= 2 * top):
        top = need * 1.1
    return top


def _upto(b: np.ndarray, top: float) -> slice:
    """The sizes up to the axis' end and one past it, so that a line reaches the edge."""
    return slice(0, min(b.shape[0], int(np.searchsorted(b, top, side="right")) + 1))


def _needed_line(series: list, need: int, height: int, scale: float):
    """A dashed upright at members_needed across the drawn series' range (None: nothing drawn)."""
    ys = [s.ys[np.isfinite(s.ys)] for s in series]
    ys = [y for y in ys if y.size]
    if not ys:
        return None
    y0, y1 = min(float(y.min()) for y in ys), max(float(y.max()) for y in ys)
    return _dashed(np.array([need, need], float), np.array([y0, y1]) / scale, pieces=max(3, height))


def _dashed(xs: np.ndarray, ys: np.ndarray, pieces: int = 24) -> tuple[np.ndarray, np.ndarray]:
    """A straight line from (xs[0], ys[0]) to (xs[1], ys[1]) cut into dashes (NaN gaps)."""
    t = np.linspace(0.0, 1.0, 2 * pieces)
    x = xs[0] + (xs[1] - xs[0]) * t
    y = ys[0] + (ys[1] - ys[0]) * t
    y[2::4] = np.nan      # every other pair of points dropped: dashes
    y[3::4] = np.nan
    return x, y


def render_curves(v: View, mono: bool, width: int, height: int) -> list:
    """The view's curves as lines of (text, style) runs (marks without colour): the textbook curve
    faintly, the band, the classes, then all rows on top; the limit and members_needed dashed."""
    scale = 100.0 if v.is_classes else 1.0
    log = v.log_x
    series = []

    def add(xs, ys, colour, mark):
        xs = np.asarray(xs, float)
        ys = np.asarray([np.nan if y is None else y for y in ys], float) * scale
        if len(xs):
            series.append(Series(np.log10(np.maximum(xs, 1e-9)) if log else xs, ys,
                                 None if mono else rgb(colour), mark if mono else None))

    def put(name, colour, mark):
        xs, ys = v.curves.get(name, ((), ()))
        add(xs, ys, colour, mark)

    if not v.curves or not len(v.curves.get("error", ((), ()))[0]):
        return [[("no members yet", Style(italic=True))]]
    if not v.per_member:
        # a measure: its points at the sizes where the job computed it, over the same members axis
        scale = 1.0
        if not len(v.curves.get("m", ((), ()))[0]):
            return [[(f"no {v.measure_label} yet", Style(italic=True))]]
        xs = v.curves["error"][0]
        mf = v.measure_fit
        c = (mf or {}).get("curve") or {}
        if not c.get("b"):
            put("m_lo", BAND, MONO_BAND)
            put("m_hi", BAND, MONO_BAND)
            put("m", OVERALL, MONO_OVERALL)
            return _plot(series, v, xs[0], xs[-1], width, height)
        # the estimate for the kept ensemble by size, with the textbook points faint beside it
        need = mf.get("members_needed")
        top = _top(v.members, need, v.log_x)
        if v.show_raw:
            put("m", RAW, MONO_RAW)
        b = np.asarray(c["b"], float)
        keep = _upto(b, top)
        add(b[keep], np.asarray(c["lo"])[keep], BAND, MONO_BAND)
        add(b[keep], np.asarray(c["hi"])[keep], BAND, MONO_BAND)
        add(b[keep], np.asarray(c["error"])[keep], OVERALL, MONO_OVERALL)
        if mf.get("limit") is not None:
            add(*_dashed(np.array([1.0, top]), np.array([mf["limit"], mf["limit"]])), LIMIT, MONO_LIMIT)
        line = _needed_line(series, need, height, scale) if need and need <= top else None
        if line is not None:
            add(*line, LIMIT, MONO_LIMIT)
        return _plot(series, v, xs[0], top, width, height)
    top = x_top(v)
    fit = v.fit
    if v.show_raw:
        put("raw" if "raw" in v.curves else "error", RAW, MONO_RAW)
    order = []
    if v.is_classes:
        order = [k for k in range(len(v.classes)) if k != v.highlight]
        if v.highlight is not None:
            order.append(v.highlight)          # drawn last: on top
    if fit is None:
        # before the first refit the journal's figures are the textbook ones, member by member
        put("lo", BAND, MONO_BAND)
        put("hi", BAND, MONO_BAND)
        for k in order:
            dim = v.highlight is not None and k != v.highlight
            put(k, DIMMED if dim else class_colour(k), MONO_DIMMED if dim else class_mark(k))
        put("error", OVERALL, MONO_OVERALL)
    else:
        b = np.asarray(fit["b"], float)
        keep = _upto(b, top)
        bx = b[keep]
        add(bx, np.asarray(fit["lo"])[keep], BAND, MONO_BAND)
        add(bx, np.asarray(fit["hi"])[keep], BAND, MONO_BAND)
        for k in order:
            if k < len(fit.get("class_error") or []):
                dim = v.highlight is not None and k != v.highlight
                add(bx, np.asarray(fit["class_error"][k])[keep], DIMMED if dim else class_colour(k),
                    MONO_DIMMED if dim else class_mark(k))
        add(bx, np.asarray(fit["error"])[keep], OVERALL, MONO_OVERALL)
        lim = v.error_limit
        if lim is not None:
            x, y = _dashed(np.array([1.0, top]), np.array([lim, lim]))
            add(x, y, LIMIT, MONO_LIMIT)
    need = v.members_needed
    line = _needed_line(series, need, height, scale) if fit is not None and need and need <= top else None
    if line is not None:
        add(*line, LIMIT, MONO_LIMIT)
    return _plot(series, v, v.curves["error"][0][0], top, width, height)


def _plot(series: list, v: View, lo: float, hi: float, width: int, height: int) -> list:
    """The series over a members axis from lo to hi (ticks laid out for the width)."""
    if v.log_x:
        x_range = (math.log10(max(lo, 1)), math.log10(max(hi, 1)))
        ticks = log_ticks(lo, hi, width)
    else:
        x_range = (float(lo), float(hi))
        t = nice_ticks(lo, hi, most=max(2, width // 10))
        ticks = (t, [f"{x:,}" for x in t])
    if x_range[1] <= x_range[0]:
        x_range = (x_range[0] - 0.5, x_range[0] + 0.5)
    return plot_lines(series, width, height, x_range=x_range, x_ticks=ticks)


def curve_key(v: View, mono: bool) -> Text:
    """One line saying which line is which, with the error limit and the members needed."""
    t = Text(no_wrap=True, overflow="ellipsis")
    t.append((MONO_OVERALL if mono else "━") + (" all" if v.per_member else " " + v.measure_label),
             style="" if mono else rgb(OVERALL))
    t.append("  ")
    t.append((MONO_BAND if mono else "─") + " 95%", style="" if mono else rgb(BAND))
    if not v.per_member:
        mf = v.measure_fit
        if mf is None or not (mf.get("curve") or {}).get("b"):
            return t
        if v.show_raw:
            t.append("  ")
            t.append((MONO_RAW if mono else "━") + " textbook", style="" if mono else rgb(RAW))
        if mf.get("limit") is not None:
            t.append("  ")
            rate = v.measure in ("error", "balanced-error")
            lim = f"{100 * mf['limit']:.2f}%" if rate else f"{mf['limit']:.4g}"
            need = f"{mf['members_needed']:,}" if mf.get("members_needed") else "beyond reach"
            t.append((MONO_LIMIT if mono else "╌") + f" limit {lim} · needed {need}", style="" if mono else rgb(LIMIT))
        return t
    if v.show_raw:
        t.append("  ")
        t.append((MONO_RAW if mono else "━") + " textbook", style="" if mono else rgb(RAW))
    if v.fit is not None and v.error_limit is not None:
        t.append("  ")
        lim = f"{100 * v.error_limit:.2f}%" if v.is_classes else f"{v.error_limit:.4g}"
        need = f"{v.members_needed:,}" if v.members_needed else "beyond reach"
        t.append((MONO_LIMIT if mono else "╌") + f" limit {lim} · needed {need}", style="" if mono else rgb(LIMIT))
    if v.is_classes:
        for k, name in enumerate(v.classes):
            dim = v.highlight is not None and k != v.highlight
            t.append("  ")
            style = "" if mono else rgb(DIMMED if dim else class_colour(k))
            if v.highlight == k:
                style += " bold underline"
            mark = (MONO_DIMMED_KEY if dim else class_mark(k)) if mono else "━"
            t.append(mark + " " + name, style=style.strip())
    return t


class Caution(TextPanel):
    """The line under the curve: what the textbook and the estimated curves are."""

    DEFAULT_CSS = """
    Caution {
        height: auto;
        padding: 0 1;
        color: $text-muted;
    }
    """

    def show(self, v: View) -> None:
        room = max(10, self.size.width - 2)
        text = caution(v, room)
        self.put(text, lambda: text, lines=-(-len(text) // room))


class CurveKey(Panel):
    """Which line is which."""

    DEFAULT_CSS = """
    CurveKey {
        height: 1;
    }
    """

    def show(self, v: View, mono: bool) -> None:
        mf = v.measure_fit or {}
        self.put((tuple(v.classes), v.highlight, mono, v.task, v.measure, v.show_raw, v.error_limit,
                  v.members_needed, v.fit is not None, mf.get("limit"), mf.get("members_needed")),
                 lambda: curve_key(v, mono), lines=1)


class CurvePanel(Column):
    """Plot and its key (the caution line sits under the panel)."""

    DEFAULT_CSS = """
    CurvePanel {
        width: 1fr;
        height: 1fr;
        border: round $foreground 30%;
        border-title-color: $text-muted;
        padding: 0 1;
    }
    """

    def compose(self) -> ComposeResult:
        yield CurvePlot(id="curve-plot")
        yield CurveKey(id="curve-key")

    def on_mount(self) -> None:
        self.border_title = "Error of the kept ensemble by size"

    @property
    def plot_width(self) -> int:
        """Points worth drawing: braille has two dots per cell across."""
        plot = self._plot()
        return max(40, 2 * plot.size.width) if plot is not None else 200

    _parts = None

    def _plot(self):
        if self._parts is None:
            plots, keys = self.query(CurvePlot), self.query(CurveKey)
            if not plots or not keys:
                return None             # not composed yet
            self._parts = (plots.first(), keys.first())
        return self._parts[0]

    def show(self, v: View) -> None:
        mono = self.app.no_color
        what = "% of rows" if v.is_classes else "MSE"
        title = f"Error of the kept ensemble by size ({what})"
        if not v.per_member:
            title = f"{v.measure_label} by ensemble size"
        if title != self.border_title:      # setting it repaints (the keys' captions: the app, tui/keys.py)
            self.border_title = title
        if self._plot() is None:
            return                      # not composed yet: the next redraw draws it
        plot, key = self._parts
        plot.draw(v, mono)
        key.show(v, mono)
