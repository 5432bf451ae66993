"""The run's settings from its start line, and the journal's latest warnings."""
from __future__ import annotations

from rich.text import Text

from ..view import View
from .base import Panel
from .texttable import pairs

SHOWN = ("members", "features_per_split", "min_leaf", "depth_limit", "draw", "bins", "seed", "threads",
         "keep_members")


# What None means for each setting (Config's docs), so the panel never shows a bare dash.
UNSET = {"features_per_split": "auto", "depth_limit": "none", "threads": "all cores"}


def settings_rows(v: View) -> list[tuple[str, str]]:
    cfg = v.config or {}
    return [(k, UNSET.get(k, "-") if cfg.get(k) is None else str(cfg[k])) for k in SHOWN if k in cfg]


class SettingsPanel(Panel):
    """Config fields of the run (as the start line has them) and up to three warnings."""

    DEFAULT_CSS = """
    SettingsPanel {
        height: auto;
        border-top: solid $foreground 30%;
        border-title-color: $text-muted;
        padding: 0 1;
    }
    """

    def on_mount(self) -> None:
        self.border_title = " settings "

    def show(self, v: View) -> None:
        rows = settings_rows(v)
        key = (tuple(rows), tuple(v.warnings), v.resumed)
        self.put(key, lambda: self._body(rows, v), lines=len(rows) + len(v.warnings) + v.resumed)

    def _body(self, rows, v: View) -> Text:
        t = pairs(rows, label_width=0)
        if v.resumed:
            t.append("\nresumed from a checkpoint", style="italic")
        for w in v.warnings:
            t.append("\n! " + w, style="bold")
        return t
