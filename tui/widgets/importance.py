"""Feature importance so far (runs with --importance): the largest OOB permutation importances."""
from __future__ import annotations

from rich.text import Text

from ..view import View
from .base import Panel

MOST = 6


def importance_text(v: View, most: int = MOST) -> Text:
    """The top features, mean rise in OOB error and its standard error over members."""
    t = Text()
    rows = v.importance[:most]
    w = min(12, max(len(r[0]) for r in rows))
    for i, (name, mean, se) in enumerate(rows):
        if i:
            t.append("\n")
        t.append(f"{name[:w]:<{w}} ", style="dim")
        t.append(f"{mean:>7.4f}" if v.is_classes else f"{mean:>7.3g}")
        if se is not None:
            t.append(f" ±{se:.2g}", style="dim")
    return t


class ImportancePanel(Panel):
    """Shown only while the journal carries importance."""

    DEFAULT_CSS = """
    ImportancePanel {
        height: auto;
        border-top: solid $foreground 30%;
        border-title-color: $text-muted;
        padding: 0 1;
    }
    """

    def on_mount(self) -> None:
        self.border_title = " importance "

    def show(self, v: View) -> None:
        shown = bool(v.importance)
        if self.display != shown:
            self.display = shown
        if not shown:
            return
        top = tuple(v.importance[:MOST])
        self.put(top, lambda: importance_text(v), lines=len(top))
