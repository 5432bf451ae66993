"""The two modal screens: the list of keys and the stop confirmation."""
from __future__ import annotations

from rich.table import Table
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Static

SEEN = [
    ("curve", "OOB error after each member; thin lines: its 95% interval"),
    ("by class", "each class's OOB error and its Wilson 95% interval"),
    ("confusion", "true class down, OOB vote across; row shares"),
    ("covered", "rows left out of at least one draw: judged at all"),
]

KEYS = [
    ("q", "leave the dashboard (the job goes on)"),
    ("s", "ask the job to stop cleanly (asks first)"),
    ("l", "member axis: linear or log scale"),
    ("c", "highlight the next class in the curve and tables"),
    ("?", "this list"),
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
        border: round $secondary;
        padding: 0 2;
        background: $surface;
    }
    HelpScreen #help-title {
        text-style: bold;
        margin-bottom: 1;
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

    def compose(self) -> ComposeResult:
        t = Table.grid(padding=(0, 3))
        t.add_column(style="bold", no_wrap=True)
        t.add_column()
        for k, what in KEYS:
            t.add_row(k, what)
        seen = Table.grid(padding=(0, 2))
        seen.add_column(style="dim", no_wrap=True)
        seen.add_column()
        for k, what in SEEN:
            seen.add_row(k, what)
        with Vertical():
            yield Static("Keys", id="help-title")
            yield Static(t, id="help-keys")
            yield Static(seen, id="help-seen")
            yield Static("escape, enter or ? closes this list", id="help-foot")

    def action_dismiss(self) -> None:
        self.dismiss(None)


class StopScreen(ModalScreen[bool]):
    """Asks before writing a stop request; answers True for yes."""

    DEFAULT_CSS = """
    StopScreen {
        align: center middle;
    }
    StopScreen > Vertical {
        width: 60;
        max-width: 95%;
        height: auto;
        border: round $warning;
        padding: 1 2;
        background: $surface;
    }
    StopScreen Horizontal {
        height: auto;
        margin-top: 1;
    }
    StopScreen Button {
        margin-right: 2;
    }
    """

    BINDINGS = [
        Binding("y", "answer(True)", "yes", show=False),
        Binding("n,escape", "answer(False)", "no", show=False),
    ]

    def __init__(self, members: int):
        super().__init__()
        self.members = members

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Static(f"Stop the job at {self.members:,} members?", id="stop-question")
            yield Static("It finishes the member in hand, saves a checkpoint and the model, and ends "
                         "as 'stopped'. `baggr resume` can go on later.", id="stop-detail")
            with Horizontal():
                yield Button("y  stop it", id="stop-yes", variant="warning")
                yield Button("n  keep going", id="stop-no", variant="primary")

    def on_mount(self) -> None:
        self.query_one("#stop-no", Button).focus()   # enter alone never stops a job

    def on_button_pressed(self, event: Button.Pressed) -> None:
        self.dismiss(event.button.id == "stop-yes")

    def action_answer(self, yes: bool) -> None:
        self.dismiss(yes)
