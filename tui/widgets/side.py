"""The side column: progress (with the job's process) above, the run's settings below, in one frame."""
from __future__ import annotations

from textual.app import ComposeResult

from .base import Column
from .importance import ImportancePanel
from .progress import ProgressPanel
from .settings import SettingsPanel


class SidePanel(Column):
    """Progress and settings share one frame, to spare rows on a small terminal; what does not fit is cut."""

    DEFAULT_CSS = """
    SidePanel {
        width: 34;
        height: 100%;
        border: round $foreground 30%;
        border-title-color: $text-muted;
        overflow: hidden hidden;
    }
    """

    def compose(self) -> ComposeResult:
        yield ProgressPanel(id="progress")
        yield ImportancePanel(id="importance")
        yield SettingsPanel(id="settings")

    def on_mount(self) -> None:
        self.border_title = "progress"
