"""For regression: the OOB figures of the fit in place of the per-class panels."""
from __future__ import annotations

from rich.text import Text

from .. import fmt
from ..view import View
from .base import Panel
from .texttable import pairs


def fit_table(v: View) -> Text:
    return pairs([
        ("OOB MSE", Text(fmt.num(v.error), style="bold")),
        ("95% interval", fmt.span(v.interval, False)),
        ("OOB R²", fmt.num(v.r2) if v.r2 is None else f"{v.r2:.4f}"),
        ("RMSE", "-" if v.error is None else fmt.num(v.error ** 0.5)),
        ("covered", "-" if v.coverage is None else f"{fmt.pct(v.coverage)} of {fmt.count(v.rows)} rows"),
    ], gap=2)


class FitPanel(Panel):
    """OOB MSE, its interval, R² and coverage."""

    DEFAULT_CSS = """
    FitPanel {
        height: auto;
        padding: 0 1;
    }
    """

    def on_mount(self) -> None:
        self.parent.border_title = "out-of-bag fit"

    def show(self, v: View) -> None:
        self.put((v.error, v.interval, v.r2, v.coverage, v.rows), lambda: fit_table(v), lines=5)
