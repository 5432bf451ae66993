"""The run's settings from its start line, and the journal's latest warnings."""
from __future__ import annotations

from rich.console import Group
from rich.table import Table
from rich.text import Text

from ..view import View
from .base import Panel

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

    def _body(self, rows, v: View):
        g = Table.grid(padding=(0, 1, 0, 0))
        g.add_column(style="dim", no_wrap=True)
        g.add_column(no_wrap=True, overflow="ellipsis")
        for k, val in rows:
            g.add_row(k, val)
        parts = [g]
        if v.resumed:
            parts.append(Text("resumed from a checkpoint", style="italic"))
        for w in v.warnings:
            parts.append(Text("! " + w, style="bold", overflow="ellipsis", no_wrap=True))
        return Group(*parts)
