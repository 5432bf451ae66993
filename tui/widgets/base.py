"""Panels that repaint only when what they show has changed, drawn through Textual's line API.

Why not Static: a Static turns its rich Text into Textual content and lays every line out again
at each repaint, about 0.2 ms a line here; the progress figures change twice a second and that
alone was the largest single cost of a redraw (bench/README.md). A Panel cuts its Text into one
Strip a line when the figures change and hands Textual those strips as they are.
"""
from __future__ import annotations

from rich.cells import cell_len
from rich.segment import Segment
from rich.style import Style
from rich.text import Text
from textual.strip import Strip
from textual.widget import Widget
from textual.containers import Horizontal, Vertical
from textual.screen import Screen
from textual.widgets import Static

BLANK = Style()          # Textual's filters (NO_COLOR) want a style on every segment
ELLIPSIS = "…"


def text_lines(text: Text, get_style) -> list[list[Segment]]:
    """Segments of each line of `text` (no wrapping), each with its combined style.

    get_style: turns a style string into a Style (the app console's, which caches what it parsed).
    """
    lines = []
    for line in text.split("\n", allow_blank=True):
        plain = line.plain
        n = len(plain)
        base = get_style(line.style) if isinstance(line.style, str) and line.style else (
            line.style if isinstance(line.style, Style) else None)
        spans = [(s.start, s.end, get_style(s.style) if isinstance(s.style, str) else s.style)
                 for s in line.spans if s.end > s.start]
        if not spans:
            lines.append([Segment(plain, base or BLANK)] if plain else [])
            continue
        cuts = sorted({0, n, *(s for s, _, _ in spans), *(e for _, e, _ in spans)})
        segs = []
        for a, b in zip(cuts, cuts[1:]):
            if b > n:
                break
            style = base
            for s, e, st in spans:            # later spans lie over earlier ones, as in rich
                if s <= a and e >= b and st:
                    style = st if style is None else style + st
            segs.append(Segment(plain[a:b], style or BLANK))
        lines.append(segs)
    return lines


def fit(segments: list[Segment], width: int) -> list[Segment]:
    """One line exactly `width` cells: padded, or cut with an ellipsis in the last cell."""
    n = sum(cell_len(s.text) for s in segments)
    if n <= width:
        return segments + [Segment(" " * (width - n), BLANK)] if n < width else segments
    if width <= 0:
        return []
    out, room = [], width - 1
    for seg in segments:
        k = cell_len(seg.text)
        if k > room:
            if room:
                out.append(seg.split_cells(room)[0])
            break
        out.append(seg)
        room -= k
    last = out[-1].style if out else BLANK
    used = sum(cell_len(s.text) for s in out)
    return out + [Segment(" " * (width - 1 - used) + ELLIPSIS, last or BLANK)]


def pair_lines(rows, get_style, label_width: int = 7, label_style: str = "dim") -> list[list[Segment]]:
    """Label / value lines as segments (what texttable.pairs gives as Text, without building one):
    labels in a column of at least `label_width`; a value is a str or a one-line Text."""
    lab = get_style(label_style)
    w = max([label_width] + [cell_len(k) for k, _ in rows])
    out = []
    for k, val in rows:
        segs = [Segment(k + " " * (w - cell_len(k) + 1), lab)]
        if isinstance(val, Text):
            segs += text_lines(val, get_style)[0] if val.plain else []
        elif val:
            segs.append(Segment(str(val), BLANK))
        out.append(segs)
    return out


class KeepLines:
    """Widget mixin: the lines last rendered are handed back as they are until the widget is dirty again.

    Textual asks every widget whose clip overlaps a repaint for all its lines, and runs each of them
    through its styling and filters, even when the widget did not change: on this dashboard, where the
    progress figures change twice a second, that walk over a dozen widgets cost more than drawing the
    figures. Everything that makes Textual draw a widget again goes through Widget._set_dirty, so
    the kept lines are dropped there (a private method: tests/test_tui.py checks that a changed
    widget shows its new lines).
    """

    _kept = None                # (crop, size, lines)

    def _set_dirty(self, *regions) -> None:
        self._kept = None
        super()._set_dirty(*regions)

    def render_lines(self, crop):
        kept = self._kept
        if kept is not None and kept[0] == crop and kept[1] == self.outer_size:
            return kept[2]
        lines = self._render_lines(crop)
        self._kept = (crop, self.outer_size, lines)
        return lines

    def _render_lines(self, crop):
        return super().render_lines(crop)


class Painted(KeepLines, Widget):
    """A widget whose lines are built by paint() when its figures change.

    Without a border, the lines are styled here, in one pass when they change (through Textual's
    styling they cost about 0.1 ms a line).
    """

    _version = 0                # bumped by changed(): the figures are new
    _made = None                # (key, the widget's base style, content lines as segments with it laid under)

    def paint(self, width: int, height: int) -> list[list[Segment]]:
        """The content lines as segments, each line exactly `width` cells (subclasses)."""
        return []

    def changed(self, layout: bool = False) -> None:
        """The figures changed: paint again and repaint."""
        self._version += 1
        self.refresh(layout=layout)

    def notify_style_update(self) -> None:
        self._version += 1          # colours are part of the painted lines
        super().notify_style_update()

    def _content(self) -> tuple:
        """(base style, content lines): painted again only when the figures or the size changed."""
        size = self.size
        key = (self._version, size)
        if self._made is None or self._made[0] != key:
            base = self.rich_style
            lines = [[Segment(t, base + st if st else base) for t, st, _ in ln]
                     for ln in self.paint(size.width, size.height)]
            self._made = (key, base, lines)
        return self._made[1], self._made[2]

    def render_line(self, y: int) -> Strip:
        base, lines = self._content()
        width = self.size.width
        return Strip(lines[y], width) if 0 <= y < len(lines) else Strip.blank(width, base)

    def _render_lines(self, crop):
        styles = self.styles
        if any(edge for edge, _ in styles.border) or any(edge for edge, _ in styles.outline) or \
                styles.opacity != 1 or styles.tint.a or styles.text_opacity != 1:
            return super()._render_lines(crop)      # a frame or an effect: Textual draws it
        base, lines = self._content()
        width, height = self.outer_size           # (size is the content's)
        top, right, bottom, left = styles.padding
        inner = self.size.width
        pad_l, pad_r = [Segment(" " * left, base)] if left else [], [Segment(" " * right, base)] if right else []
        _, background = self.background_colors
        filters = self.get_line_filters()

        def line(segments):
            for f in filters:
                segments = f.apply(segments, background)
            return Strip(segments, width)
        blank = line([Segment(" " * width, base)])
        whole = [blank] * top
        for y in range(height - top - bottom):
            whole.append(line(pad_l + (lines[y] if y < len(lines) else [Segment(" " * inner, base)]) + pad_r))
        whole += [blank] * bottom
        if crop.x == 0 and crop.width == width:
            return whole[crop.y:crop.bottom]
        return [s.crop(crop.x, crop.right) for s in whole[crop.y:crop.bottom]]


class Shown:
    """What a panel showed last: `key` (its figures) and how many lines it took."""

    _shown_key = None
    _shown_lines = None

    def _news(self, key, lines: int | None):
        """None when `key` is what is shown already; else whether the new figures need a layout pass
        (only when their line count changes, or is not given), and remember them as shown."""
        if key == self._shown_key:
            return None
        layout = lines is None or lines != self._shown_lines
        self._shown_key, self._shown_lines = key, lines
        return layout


class Panel(Shown, Painted):
    """A few lines of text; put() skips repaints (and layout passes) when the figures are unchanged."""

    DEFAULT_CSS = """
    Panel {
        height: auto;
    }
    """

    _lines: list = []           # segments of each line

    def put(self, key, make, lines: int | None = None) -> bool:
        """Show make() (a Text) unless `key` equals the last one; lay out again only when the line count changes."""
        return self.put_lines(key, lambda: text_lines(make(), self.app.console.get_style), lines)

    def put_lines(self, key, make, lines: int | None = None) -> bool:
        """Like put(), make() giving the lines as lists of segments already (no Text to cut)."""
        layout = self._news(key, lines)
        if layout is None:
            return False
        self._lines = make()
        self.changed(layout=layout)
        return True

    def get_content_width(self, container, viewport) -> int:
        return max((sum(cell_len(s.text) for s in ln) for ln in self._lines), default=0)

    def get_content_height(self, container, viewport, width: int) -> int:
        return len(self._lines)

    def paint(self, width: int, height: int) -> list[list[Segment]]:
        return [fit(ln, width) for ln in self._lines]


class TextPanel(Shown, KeepLines, Static):
    """A Static with the same put(): for text that wraps (Textual lays it out)."""

    def put(self, key, make, lines: int | None = None) -> bool:
        layout = self._news(key, lines)
        if layout is None:
            return False
        self.update(make(), layout=layout)
        return True


class Row(KeepLines, Horizontal):
    """A Horizontal that keeps its lines (see KeepLines)."""


class Column(KeepLines, Vertical):
    """A Vertical that keeps its lines (see KeepLines)."""


class Frame(Column):
    """A rounded frame holding one panel, which then has no border of its own: a bordered widget
    goes through Textual's styling line by line at each repaint, a frame keeps its lines (KeepLines)."""

    DEFAULT_CSS = """
    Frame {
        height: auto;
        border: round $foreground 30%;
        border-title-color: $text-muted;
    }
    """


class Backdrop(KeepLines, Screen):
    """The main screen, keeping its lines (see KeepLines)."""
