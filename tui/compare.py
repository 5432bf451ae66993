"""The dashboard of a comparison directory: every candidate's OOB curve together and the candidates
ranked by their latest OOB figure, live, from their journals. Enter opens the chosen candidate's own
dashboard; Escape there comes back here. The paired tests need the per-row figures: `baggr report`.
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
from rich.segment import Segment
from rich.style import Style
from rich.table import Table
from rich.text import Text
from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.widgets import Static

from baggr import units
from baggr.runs.journal import JOURNAL, JournalReader, RunState, job_status, request_stop, stop_requested

from .widgets.base import Backdrop, Painted
from .widgets.braille import Series, plot_lines
from .widgets.curve import nice_ticks
from .widgets.palette import class_colour, class_mark, rgb

REFRESH = 1.0


class Candidates:
    """The candidates of a comparison and their journals, folded as they grow."""

    def __init__(self, path):
        self.path = Path(path)
        d = json.loads((self.path / "comparison.json").read_text())
        self.items = [{"number": int(c["number"]), "dir": self.path / str(c["run_dir"]),
                       "label": " ".join(f"{k}={'none' if v is None else v}" for k, v in c["settings"].items())}
                      for c in d["candidates"]]
        self.states = [RunState() for _ in self.items]
        self.readers = [JournalReader(c["dir"] / JOURNAL) for c in self.items]
        self.own = RunState()
        self.own_reader = JournalReader(self.path / JOURNAL)

    def refresh(self) -> None:
        for reader, state in ((self.own_reader, self.own), *zip(self.readers, self.states)):
            while reader.read_into(state.fold, 1 << 20):
                pass

    def status(self) -> str:
        return job_status(self.path, self.own)

    def task(self) -> str | None:
        return next((s.task for s in self.states if s.task), None)

    def ranked(self) -> list[dict]:
        """Candidates with their latest figures, best (lowest OOB error or MSE) first; none yet: last."""
        rows = []
        for c, s in zip(self.items, self.states):
            rows.append(dict(c, state=s, members=s.members, target=s.members_target, error=s.error,
                             interval=s.interval, status=job_status(c["dir"], s)))
        return sorted(rows, key=lambda r: (r["error"] is None, r["error"] or 0.0, r["number"]))


class Curves(Painted):
    """All candidates' curves in one braille plot; the selected one drawn last, on top."""

    DEFAULT_CSS = """
    Curves {
        height: 1fr;
        min-height: 6;
        padding: 0 1;
    }
    """

    def __init__(self, **kw):
        super().__init__(**kw)
        self.data = None
        self.selected = None

    def show(self, data: Candidates, selected) -> None:
        self.data, self.selected = data, selected
        self.changed()

    def paint(self, width: int, height: int) -> list[list[Segment]]:
        if self.data is None or width < 10 or height < 3:
            return []
        mono = self.app.no_color
        scale = 1.0 if self.data.task() == "regression" else 100.0
        series, hi = [], 1
        order = [i for i in range(len(self.data.items)) if self.data.items[i]["number"] != self.selected]
        order += [i for i in range(len(self.data.items)) if self.data.items[i]["number"] == self.selected]
        for i in order:
            st = self.data.states[i]
            xs, ys = st.curve("error", width=2 * width)
            if len(xs) == 0:
                continue
            hi = max(hi, xs[-1])
            ys = np.asarray([np.nan if y is None else y for y in ys], float) * scale
            k = self.data.items[i]["number"] - 1
            series.append(Series(np.asarray(xs, float), ys, None if mono else rgb(class_colour(k)),
                                 class_mark(k) if mono else None))
        if not series:
            return [[Segment("no members yet", Style(italic=True))]]
        ticks = nice_ticks(1, hi, most=max(2, width // 10))
        lines = plot_lines(series, width, height, x_range=(1.0, float(max(hi, 2))),
                           x_ticks=(ticks, [f"{x:,}" for x in ticks]))
        out = []
        for ln in lines:
            segs = [Segment(t, st) for t, st in ln]
            n = sum(len(t) for t, _ in ln)
            if n < width:
                segs.append(Segment(" " * (width - n)))
            out.append(segs)
        return out


def ranked_table(rows: list, selected, task, mono: bool) -> Table:
    what = "MSE" if task == "regression" else "error"
    t = Table(expand=True, padding=(0, 1), show_edge=False)
    for col, just in (("#", "right"), ("candidate", "left"), ("members", "right"), (f"OOB {what}", "right"),
                      ("95% interval", "right"), ("status", "left")):
        t.add_column(col, justify=just, no_wrap=col != "candidate")
    fmt = units.value if task == "regression" else units.percent
    for k, r in enumerate(rows, 1):
        n = r["number"]
        style = "reverse" if n == selected else ""
        mark = class_mark(n - 1) if mono else "━"
        name = Text(f"{mark} c{n} ", style="" if mono else rgb(class_colour(n - 1)))
        name.append(r["label"])
        iv = r["interval"]
        t.add_row(str(k), name, f"{r['members']}/{r['target'] or '-'}", "-" if r["error"] is None else fmt(r["error"]),
                  (units.value_span(iv) if task == "regression" else units.percent_span(iv, 2)) if iv else "-",
                  r["status"], style=style)
    return t


class Board(App):
    """Every candidate's curve and the ranked table; Enter opens one candidate's dashboard."""

    TITLE = "baggr compare"
    ENABLE_COMMAND_PALETTE = False
    CSS = """
    #head { height: auto; padding: 0 1; text-style: bold; }
    #table { height: auto; max-height: 50%; padding: 0 1; }
    #foot { height: auto; padding: 0 1; color: $text-muted; }
    """
    BINDINGS = [
        Binding("q", "quit", "leave"),
        Binding("ctrl+c", "quit", "leave", show=False),     # leaves the board; the comparison goes on
        Binding("up,k", "move(-1)", "up", show=False),
        Binding("down,j", "move(1)", "down", show=False),
        Binding("enter", "open", "open candidate"),
        Binding("s", "stop", "stop comparison"),
    ]

    def __init__(self, path, selected: int | None = None):
        super().__init__()
        self.data = Candidates(path)
        self.selected = selected or self.data.items[0]["number"]
        self.rows: list = []

    def get_default_screen(self) -> Backdrop:
        return Backdrop(id="_default")

    def compose(self) -> ComposeResult:
        yield Static(id="head")
        yield Curves(id="curves")
        yield Static(id="table")
        yield Static(id="foot")

    def on_mount(self) -> None:
        self.tick()
        self.set_interval(REFRESH, self.tick)

    def tick(self) -> None:
        self.data.refresh()
        self.rows = self.data.ranked()
        status = self.data.status()
        task = self.data.task()
        st = self.data.own
        asked = " (stop requested)" if stop_requested(self.data.path) and status == "running" else ""
        self.query_one("#head", Static).update(Text(
            f"{self.data.path.name}   {len(self.rows)} candidates   {status}{asked}"
            + (f" ({st.reason})" if st.reason and status != "running" else ""), no_wrap=True, overflow="ellipsis"))
        self.query_one(Curves).show(self.data, self.selected)
        self.query_one("#table", Static).update(ranked_table(self.rows, self.selected, task, self.no_color))
        keys = Text()
        for key, words in (("q", "leave (the comparison goes on)"), ("↑↓", "select"),
                           ("Enter", "open the candidate's dashboard (Esc there comes back)"),
                           ("s", "stop the comparison")):
            keys.append(key, style="bold")
            keys.append(f" {words}   ")
        keys.append("\nRanked by the latest OOB figure; the paired tests with their p-values: "
                    f"baggr report {self.data.path}")
        self.query_one("#foot", Static).update(keys)

    def action_move(self, step: int) -> None:
        order = [r["number"] for r in self.rows] or [c["number"] for c in self.data.items]
        i = order.index(self.selected) if self.selected in order else 0
        self.selected = order[max(0, min(len(order) - 1, i + step))]
        self.tick()

    def action_open(self) -> None:
        self.exit(self.selected)

    def action_stop(self) -> None:
        if self.data.status() != "running":
            self.notify("The comparison is not running: there is nothing to stop.")
            return
        request_stop(self.data.path)
        self.notify("Stop requested: every candidate ends after the member in hand.")
        self.tick()


def candidate_dir(path, number: int) -> Path:
    d = json.loads((Path(path) / "comparison.json").read_text())
    return Path(path) / next(str(c["run_dir"]) for c in d["candidates"] if int(c["number"]) == number)


def watch_comparison(path) -> int:
    """The comparison board until `q`; Enter opens a candidate's dashboard, whose Escape comes back."""
    from . import lower_priority
    from .app import Dashboard
    lower_priority()
    selected = None
    while True:
        selected = Board(path, selected).run()
        if selected is None:
            return 0
        from .opening import Opening
        sub = candidate_dir(path, selected)
        back = Dashboard(sub, opening=Opening(sub), back=True).run()
        if back != "back":
            return 0


__all__ = ["Board", "Candidates", "watch_comparison"]
