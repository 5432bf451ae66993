"""The two modal screens: the list of keys and the stop confirmation."""
from __future__ import annotations

from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import Static

SEEN = [
    ("curve", "OOB error after each member; thin lines: its 95% interval"),
    ("by class", "each class's OOB error and its Wilson 95% interval"),
    ("confusion", "true class down, OOB vote across; row shares"),
    ("covered", "rows left out of at least one draw: judged at all"),
]
SEEN_REGRESSION = [
    ("curve", "OOB MSE after each member; thin lines: its 95% interval"),
    ("fit", "OOB MSE, its interval, R² and RMSE of the OOB predictions"),
    ("covered", "rows left out of at least one draw: judged at all"),
]


class HelpScreen(ModalScreen):
    """The keys of the dashboard."""

    DEFAULT_CSS = """
    HelpScreen {
        align: center middle;
    }
    HelpScreen > Vertical {
        width: 72;
        max-width: 95%;
        height: auto;
        max-height: 95%;
        overflow-y: auto;
        border: round $foreground 50%;
        border-title-color: $text;
        border-title-style: bold;
        padding: 0 2;
        background: $surface;
    }
    HelpScreen #help-seen {
        margin-top: 1;
    }
    HelpScreen #help-foot {
        color: $text-muted;
        margin-top: 1;
    }
    """

    BINDINGS = [
        Binding("escape,question_mark,enter,h", "dismiss", "close", show=False),
    ]

    def __init__(self, keys, regression: bool = False):
        super().__init__()
        self.keys = list(keys)        # (label, what it does) of the keys that act now (tui/keys.py)
        self.seen = SEEN_REGRESSION if regression else SEEN

    def compose(self) -> ComposeResult:
        t = Table.grid(padding=(0, 3))
        t.add_column(style="bold", no_wrap=True)
        t.add_column()
        for k, what in self.keys:
            t.add_row(k, what)
        seen = Table.grid(padding=(0, 2))
        seen.add_column(style="dim", no_wrap=True)
        seen.add_column()
        for k, what in self.seen:
            seen.add_row(k, what)
        with Vertical(id="help-box"):
            yield Static(t, id="help-keys")
            yield Static(seen, id="help-seen")
            yield Static("escape, enter or ? closes this list", id="help-foot")

    def on_mount(self) -> None:
        self.query_one("#help-box").border_title = "keys"

    def action_dismiss(self) -> None:
        self.dismiss(None)


class StopScreen(ModalScreen[bool]):
    """Asks before writing a stop request, in a frame laid over the progress frame whose `s` it answers;
    answers True for yes. The member count follows the job while it asks (`show`)."""

    DEFAULT_CSS = """
    StopScreen {
        align: right top;
        background: $background 50%;
    }
    StopScreen > #stop-box {
        width: 34;
        height: auto;
        margin-top: 1;
        border: round $warning;
        border-title-color: $warning;
        border-title-style: bold;
        border-subtitle-color: $text-muted;
        padding: 0 1;
        background: $surface;
    }
    StopScreen.-wide > #stop-box {
        width: 40;
    }
    StopScreen #stop-detail {
        color: $text-muted;
        margin: 1 0;
    }
    """

    BINDINGS = [
        Binding("y", "answer(True)", "yes", show=False),
        Binding("n,escape,enter", "answer(False)", "no", show=False),   # enter alone never stops a job
    ]

    def __init__(self, members: int, target: int | None = None):
        super().__init__()
        self.members, self.target = members, target

    def compose(self) -> ComposeResult:
        with Vertical(id="stop-box"):
            yield Static(self._count(), id="stop-count")
            yield Static("It finishes the member in hand, saves a checkpoint and the model, and ends as "
                         "'stopped'; baggr resume goes on from there.", id="stop-detail")
            yield Static(Text.assemble(("y", "bold"), "  stop it now\n", ("n", "bold"), "  keep going"),
                         id="stop-keys")

    def on_mount(self) -> None:
        box = self.query_one("#stop-box")
        box.border_title = "stop the job?"
        box.border_subtitle = "y or n"

    def _count(self) -> Text:
        t = Text("the job is at ")
        t.append(f"{self.members:,}", style="bold")
        t.append(f" of {self.target:,} members" if self.target else " members")
        return t

    def show(self, members: int, target: int | None) -> None:
        """The job's latest count (called at each redraw while the question is open)."""
        if (members, target) != (self.members, self.target):
            self.members, self.target = members, target
            self.query_one("#stop-count", Static).update(self._count())

    def action_answer(self, yes: bool) -> None:
        self.dismiss(yes)
