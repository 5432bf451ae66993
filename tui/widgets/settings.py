"""The run's settings from its start line, and the journal's latest warnings."""
from __future__ import annotations

from rich.text import Text

from baggr.runs.journal import grown_on_rows

from ..view import View
from .base import Panel
from .texttable import pairs

# The settings as `baggr train` names them.
SHOWN = (("members", "members"), ("features_per_split", "features/split"), ("min_leaf", "min leaf"),
         ("depth_limit", "depth limit"), ("draw", "draw"), ("bins", "bins"), ("seed", "seed"),
         ("threads", "threads"), ("keep_members", "trees kept"))


def _text(key: str, value, res: dict) -> str:
    """A setting's value in words, with what the data chose for an unset one (the start line's resolved)."""
    if key == "features_per_split":
        k, n, rule = res.get("features_per_split"), res.get("features"), res.get("features_rule")
        if k is not None and n is not None:
            return f"{k} of {n} ({rule})" if rule else f"{k} of {n}"
        return "sqrt or 1/3 (by task)" if value is None else str(value)
    if key == "keep_members":
        return "no (--estimate-only)" if value is False else "yes"
    if key == "threads" and value is None:
        return f"all cores ({res['threads']})" if res.get("threads") else "all cores"
    if key == "depth_limit" and value is None:
        return "none"
    return "-" if value is None else str(value)


def settings_rows(v: View) -> list[tuple[str, str]]:
    cfg, res = v.config or {}, v.resolved or {}
    rows = [(label, _text(k, cfg.get(k), res)) for k, label in SHOWN if k in cfg]
    if v.cluster:     # members grown on a Dask cluster: where, in place of the local threads
        rows = [r for r in rows if r[0] != "threads"] + grown_on_rows(v.cluster)
    return rows


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
