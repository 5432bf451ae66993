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


def fit_strip(segments: list[Segment], width: int) -> Strip:
    """One line exactly `width` cells: padded, or cut with an ellipsis in the last cell."""
    strip = Strip(segments)
    n = strip.cell_length
    if n <= width:
        return strip.extend_cell_length(width, BLANK) if n < width else strip
    if width <= 0:
        return Strip([], 0)
    cut = list(strip.crop(0, width - 1))
    last = cut[-1].style if cut else BLANK
    return Strip(cut + [Segment(ELLIPSIS, last or BLANK)], width)


class Panel(Widget):
    """A few lines of text; put() skips repaints (and layout passes) when the figures are unchanged."""

    DEFAULT_CSS = """
    Panel {
        height: auto;
    }
    """

    _shown_key = None
    _shown_lines = None
    _lines: list = []           # segments of each line
    _strips = None              # (width, strips) cut for the last width drawn

    def put(self, key, make, lines: int | None = None) -> bool:
        """Show make() (a Text) unless `key` equals the last one; lay out again only when the line count changes."""
        if key == self._shown_key:
            return False
        layout = lines is None or lines != self._shown_lines
        self._shown_key, self._shown_lines = key, lines
        self._lines = text_lines(make(), self.app.console.get_style)
        self._strips = None
        self.refresh(layout=layout)
        return True

    def get_content_width(self, container, viewport) -> int:
        return max((sum(cell_len(s.text) for s in ln) for ln in self._lines), default=0)

    def get_content_height(self, container, viewport, width: int) -> int:
        return len(self._lines)

    def render_line(self, y: int) -> Strip:
        width = self.content_region.width
        if self._strips is None or self._strips[0] != width:
            self._strips = (width, [fit_strip(ln, width) for ln in self._lines])
        strips = self._strips[1]
        return strips[y] if 0 <= y < len(strips) else Strip.blank(width, BLANK)


class TextPanel(Static):
    """A Static with the same put(): for text that wraps (Textual lays it out)."""

    _shown_key = None
    _shown_lines = None

    def put(self, key, make, lines: int | None = None) -> bool:
        if key == self._shown_key:
            return False
        layout = lines is None or lines != self._shown_lines
        self._shown_key, self._shown_lines = key, lines
        self.update(make(), layout=layout)
        return True
