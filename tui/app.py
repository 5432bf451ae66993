"""The dashboard of one run directory: `watch(run_dir)`."""
from __future__ import annotations

import time
from pathlib import Path

from textual.app import App, ComposeResult
from textual.css.query import NoMatches

from baggr.runs.journal import MEASURES_BY_TASK, RunDirError, job_status, request_stop, stop_requested

from . import keys
from .opening import Opening
from .messages import JournalAdvanced, JournalRestarted, JournalTrouble
from .screens import HelpScreen, StopScreen
from .tail import Tail
from .view import View, make_view
from .widgets import Caution, ClassPanel, ConfusionPanel, CurvePanel, FitPanel, ProgressPanel, RunBar, SidePanel
from .widgets.base import Backdrop, Frame, Row
from .widgets.importance import ImportancePanel
from .widgets.settings import SettingsPanel
from .widgets.process import ProcessProbe

# Redraws a second: 2 (the issue asks for 2 Hz or better). Each costs a few ms of the one core the
# dashboard shares with the job; news waits at most a second (the tailing thread reads at one
# tick, the next draws it).
REDRAW_EVERY = 0.5
# While lines arrive, the plot and the tables (most of a redraw's cost) follow once a second, or
# less often where drawing them takes more than HEAVY_SHARE of a core (measured at each drawing,
# up to TABLES_MOST apart); the progress figures at every redraw. Keys, resizes and a job's end
# draw everything at once.
TABLES_EVERY = 1.0
TABLES_MOST = 5.0
HEAVY_SHARE = 0.005
# The tailing thread reads when a tick wakes it (so what a tick draws was read at the one before);
# it polls on its own only while no tick runs.
TAIL_POLL = 1.0


class Dashboard(App):
    """Follows a run's journal and shows its progress, OOB curve, classes and process."""

    TITLE = "baggr"
    ENABLE_COMMAND_PALETTE = False
    CSS = """
    Screen {
        layout: vertical;
    }
    #top {
        height: 1fr;
        min-height: 10;
    }
    #bottom {
        height: auto;
        max-height: 40%;
    }
    #classes-box, #fit-box {
        width: 1fr;
    }
    #confusion-box {
        width: auto;
        max-width: 60%;
    }
    .-wide #side {
        width: 40;
    }
    """

    BINDINGS = keys.bindings()      # tui/keys.py: each key once, with where its caption sits
    # From 110 columns the side column widens (its CSS): the process line keeps all its figures.
    HORIZONTAL_BREAKPOINTS = [(0, "-narrow"), (110, "-wide")]

    def __init__(self, run_dir, *, get_time=time.time, poll: float = TAIL_POLL, opening=None, back: bool = False):
        super().__init__()
        self.back = back            # opened from a comparison's board: Escape goes back to it
        self.run_dir = Path(run_dir)
        self.get_time = get_time
        self.tail = Tail(self.run_dir, self.post_message, poll=poll, opening=opening)
        self.probe = ProcessProbe()
        self.log_x = False
        self.show_raw = True        # the textbook OOB curve, faint beside the estimate (key r)
        self.highlight: int | None = None
        self.measure: str | None = None     # the measure on the curve (None: the run's chosen one)
        self.status = "waiting"
        self.redraws = 0            # drawn frames (read by the benchmark)
        self.first_full_draw: float | None = None   # time.perf_counter() of the first draw after the opening read
        self.view: View | None = None
        self.trouble: str | None = None
        self.classes_hidden = 0     # class rows the table has no room for (said beside the `c` key)
        self._panels: dict = {}
        self._captions: dict = {}   # place -> the captions last put there

    def compose(self) -> ComposeResult:
        yield RunBar(id="runbar")
        with Row(id="top"):
            yield CurvePanel(id="curve")
            yield SidePanel(id="side")
        yield Caution(id="caution")
        with Row(id="bottom"):
            with Frame(id="classes-box"):
                yield ClassPanel(id="classes")
            with Frame(id="confusion-box"):
                yield ConfusionPanel(id="confusion")
            with Frame(id="fit-box"):
                yield FitPanel(id="fit")

    def get_default_screen(self) -> Backdrop:
        return Backdrop(id="_default")

    def on_mount(self) -> None:
        # Once every panel is composed: a fast opening read must not find half a screen to draw on.
        self.call_after_refresh(self.tail.start)
        self.set_interval(REDRAW_EVERY, self.tick)

    def on_unmount(self) -> None:
        self.tail.stop()

    # -- messages from the tailing thread

    def on_journal_advanced(self, message: JournalAdvanced) -> None:
        self.tail.waiting.clear()
        if self.first_full_draw is None and not message.backlog:
            self.redraw()                 # draw the whole history at once, without waiting for the tick
            self.tail.quiet = True        # from now on the ticks draw whatever the thread has read

    def on_journal_restarted(self, message: JournalRestarted) -> None:
        self.highlight = None
        self.notify("The journal was replaced or cut short: reading it again from the start.",
                    severity="warning")

    def on_journal_trouble(self, message: JournalTrouble) -> None:
        self.trouble = message.text
        self.notify(message.text, severity="error", timeout=8)

    # -- drawing

    def tick(self) -> None:
        """Every REDRAW_EVERY seconds: the clock, the process and whatever the journal brought."""
        if not self.tail.caught_up.is_set():
            # The opening read: say how far it got and leave the tailing thread the interpreter.
            try:
                self.query_one(RunBar).reading(self.run_dir.name, self.tail.lines)
            except NoMatches:       # the screen not composed yet, or taken down at exit
                pass
            return
        self.redraw(all_panels=False)
        self.tail.wake()

    def redraw(self, all_panels: bool = True) -> None:
        if self._panels_gone():
            return
        try:
            self._redraw(all_panels)
        except NoMatches:               # a panel still being composed: the next tick draws it
            pass

    def _panels_gone(self) -> bool:
        """True once the app is closing or a panel has left the screen: a tick can still fire
        while the widgets are taken down (seen as a frame without a parent at exit)."""
        return any(not w.is_attached for w in self._panels.values())

    _tables_at = -1e9
    tables_every = TABLES_EVERY     # seconds between drawings of the plot and tables while lines arrive

    def panel(self, cls):
        """The main screen's widget of a class, looked up once (a query walks the screen's tree)."""
        w = self._panels.get(cls)
        if w is None:
            w = self._panels[cls] = self.query_one(cls)
        return w

    def _redraw(self, all_panels: bool = True) -> None:
        curve = self.panel(CurvePanel)
        now = time.monotonic()
        # the heavy part (curves, status, tables, plot) once a second while lines arrive
        heavy = all_panels or now - self._tables_at >= self.tables_every
        cpu = time.thread_time()
        with self.tail.lock:
            state = self.tail.state
            if heavy:
                self.status = job_status(self.run_dir, state)
            view = make_view(state, run_name=self.run_dir.name, status=self.status, now=self.get_time(),
                             width=curve.plot_width, log_x=self.log_x, highlight=self.highlight,
                             stop_requested=stop_requested(self.run_dir), malformed=self.tail.reader.malformed,
                             curves=heavy, measure=self.measure, show_raw=self.show_raw)
        if not heavy and self.view is not None:
            view.curves = self.view.curves      # the curves last drawn, not downsampled again
        self.view = view
        regression = view.task == "regression"
        for panel, shown in ((ClassPanel, not regression), (ConfusionPanel, not regression), (FitPanel, regression)):
            widget = self.panel(panel).parent          # its frame
            if widget.display != shown:     # setting it, even unchanged, lays out the whole screen again
                widget.display = shown
        self.panel(RunBar).show(view, keys.captions(self, "top"))
        self.panel(ProgressPanel).show(view, self.probe.look(view.pid, view.pid_started, view.host))
        if heavy:
            self._tables_at = now
            curve.show(view)
            self._draw_tables(view, regression)
            if not all_panels:      # what a drawing on the clock costs, Textual's painting of it included
                self.call_after_refresh(self._heavy_done, cpu)
        self.panel(ImportancePanel).show(view)
        self.panel(SettingsPanel).show(view)
        self._show_captions()
        if isinstance(self.screen, StopScreen):
            self.screen.show(view.members, view.members_target)     # the question follows the job
        self.redraws += 1
        if self.first_full_draw is None and self.tail.caught_up.is_set():
            self.first_full_draw = time.perf_counter()

    def _show_captions(self) -> None:
        """Each frame's edge says the keys that act on it now (tui/keys.py); set only when changed
        (setting a frame's subtitle repaints it)."""
        self.classes_hidden = self.panel(ClassPanel).hidden
        for place, widget in (("curve", self.panel(CurvePanel)), ("classes", self.panel(ClassPanel).parent),
                              ("progress", self.panel(SidePanel))):
            text = keys.caption_markup(keys.captions(self, place))
            if self._captions.get(place) != text:
                self._captions[place] = text
                widget.border_subtitle = text

    def _heavy_done(self, cpu: float) -> None:
        cost = time.thread_time() - cpu
        self.tables_every = min(TABLES_MOST, max(TABLES_EVERY, cost / HEAVY_SHARE))

    def _draw_tables(self, view: View, regression: bool) -> None:
        self.panel(Caution).show(view)
        if regression:
            self.panel(FitPanel).show(view)
        else:
            narrow = self.size.width < 100
            # The bottom row gets at most 40% of the screen; its frame takes two lines.
            room = max(3, int(self.size.height * 0.4) - 2)
            self.panel(ClassPanel).show(view, narrow=narrow, room=room)
            # The class table keeps about 50 columns; the matrix shows row shares if the rest allows.
            self.panel(ConfusionPanel).show(view, room=self.size.width - 50)

    # -- keys (tui/keys.py lists them)

    def check_action(self, action: str, parameters) -> bool | None:
        return False if keys.disabled(self, action) else True

    def action_leave(self) -> None:
        """q or Ctrl-C: leave the dashboard; the job goes on (the command then says how to stop it)."""
        self.exit()

    def action_back(self) -> None:
        """Escape, on a candidate opened from a comparison's board: back to the board."""
        self.exit("back")

    def action_log_scale(self) -> None:
        self.log_x = not self.log_x
        self.redraw()

    def action_raw_curve(self) -> None:
        self.show_raw = not self.show_raw
        self.redraw()

    def action_cycle_class(self) -> None:
        k = len(self.view.classes) if self.view and self.view.is_classes else 0
        if not k:
            self.notify("No classes to highlight in a regression run." if self.view and self.view.task
                        else "No classes known yet.")
            return
        # none -> 0 -> 1 -> ... -> k-1 -> none
        self.highlight = 0 if self.highlight is None else (None if self.highlight + 1 >= k else self.highlight + 1)
        self.redraw()

    def action_cycle_measure(self) -> None:
        """Show the next measure on the curve: the run's chosen one first, then the others in turn."""
        v = self.view
        if v is None or not v.task:
            self.notify("No measures known yet.")
            return
        names = MEASURES_BY_TASK["regression" if v.task == "regression" else "classes"]
        now = self.measure or v.chosen_measure or names[0]
        self.measure = names[(names.index(now) + 1) % len(names)] if now in names else names[0]
        self.redraw()

    def action_help(self) -> None:
        if not isinstance(self.screen, HelpScreen):
            self.push_screen(HelpScreen(keys.listed(self), regression=bool(self.view and not self.view.is_classes)))

    def action_stop_job(self) -> None:
        if self.status != "running":
            self.notify(f"The job is {self.status}: there is nothing to stop.")
            return
        if stop_requested(self.run_dir):
            self.notify("A stop request is already waiting for the job.")
            return
        v = self.view
        self.push_screen(StopScreen(v.members if v else 0, v.members_target if v else None), self._stop_answered)

    def _stop_answered(self, yes: bool | None) -> None:
        if not yes:
            self.notify("The job goes on.")
            return
        try:
            request_stop(self.run_dir)
        except OSError as exc:
            self.notify(f"Could not write the stop request: {exc.strerror or exc}", severity="error")
            return
        self.notify("Stop requested: the job ends after the member in hand.")
        self.redraw()


def watch(run_dir, *, get_time=time.time, opening=None) -> int:
    """Show the dashboard of a run directory until `q`; returns the exit code (0).

    opening: an Opening started earlier (see tui.watch, which starts it before importing Textual).
    """
    run_dir = Path(run_dir)
    if not run_dir.is_dir():
        raise RunDirError(f"no run directory at {run_dir}")
    if opening is None:
        opening = Opening(run_dir)
    Dashboard(run_dir, get_time=get_time, opening=opening).run()
    return 0
