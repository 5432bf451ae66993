"""A Static that repaints only when what it shows has changed."""
from __future__ import annotations

from textual.widgets import Static


class Panel(Static):
    """Skips repaints (and layout passes) when the figures it shows are unchanged."""

    _shown_key = None
    _shown_lines = None

    def put(self, key, make, lines: int | None = None) -> bool:
        """Show make() unless `key` equals the last one; lay out again only when the line count changes."""
        if key == self._shown_key:
            return False
        layout = lines is None or lines != self._shown_lines
        self._shown_key, self._shown_lines = key, lines
        self.update(make(), layout=layout)
        return True
