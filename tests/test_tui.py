"""The dashboard in a headless terminal: figures shown, following a growing journal, keys, captures."""
from __future__ import annotations

import asyncio
import io
import json
import os
import threading
import time

import numpy as np
import psutil
import pytest
from rich.console import Console

from baggr.runs.journal import JOURNAL, JournalWriter
from tui.app import Dashboard
from tui.fake import CLASS_ROWS, CLASSES, dead_pid, member_fields, start_fields, write_journal
from tui.screens import HelpScreen, StopScreen
from tui.widgets import ClassPanel


def run(coro):
    """pytest-asyncio is not installed: each test drives its own event loop."""
    return asyncio.run(coro)


def screen_text(app) -> str:
    """The screen as plain text, as a person would read it (the compositor's output, colours dropped)."""
    width, height = app.size
    console = Console(width=width, height=height, file=io.StringIO(), force_terminal=True,
                      color_system=None, record=True, legacy_windows=False, safe_box=False)
    console.print(app.screen._compositor.render_update(full=True))
    return console.export_text()


def widget_text(app, selector) -> str:
    """The part of the screen a widget covers."""
    r = app.screen.query_one(selector).region
    lines = screen_text(app).splitlines()[r.y:r.y + r.height]
    return "\n".join(x[r.x:r.x + r.width] for x in lines)


async def settle(pilot, app, until, timeout: float = 20.0) -> None:
    """Let the app run until `until()` holds (a generous deadline, not a timing check)."""
    deadline = time.monotonic() + timeout
    while not until():
        if time.monotonic() > deadline:
            raise AssertionError("the dashboard did not get there:\n" + screen_text(app))
        await pilot.pause(0.05)
    await pilot.pause()


def caught_up(app):
    return lambda: app.first_full_draw is not None


def last_line(path, event="member") -> dict:
    for line in reversed(path.read_text().splitlines()):
        d = json.loads(line)
        if d["event"] == event:
            return d
    raise AssertionError(f"no {event} line")


def wilson(k, n):
    """Reference interval from scipy (Wilson 1927)."""
    stats = pytest.importorskip("scipy.stats")
    ci = stats.binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    return ci.low, ci.high


# ---------------------------------------------------------------- figures on the screen

def test_classes_run_shows_members_error_and_each_class(tmp_path):
    path = write_journal(tmp_path / "alpha", 120, members_target=500)     # this process: running
    last = last_line(path)

    async def go():
        app = Dashboard(tmp_path / "alpha")
        async with app.run_test(size=(120, 40)) as pilot:
            await settle(pilot, app, caught_up(app))
            text = screen_text(app)
            assert "120 of 500" in text and "24%" in text
            assert "running" in text and "alpha" in text
            # the headline error, as the last member line has it
            assert f"{100 * last['error']:.2f}%" in text
            lo, hi = last["interval"]
            assert f"{100 * lo:.1f}-{100 * hi:.1f}%" in text
            table = widget_text(app, "#classes")
            for k, name in enumerate(CLASSES):
                row = last["confusion"][k]
                n, wrong = sum(row), sum(row) - row[k]
                lo, hi = wilson(wrong, n)
                line = next(x for x in table.splitlines() if f"━━ {name}" in x)
                assert f"{CLASS_ROWS[k]}" in line and f"{100 * CLASS_ROWS[k] / sum(CLASS_ROWS):.1f}%" in line
                assert f"{100 * last['class_error'][k]:.2f}%" in line
                assert f"{100 * lo:.1f}-{100 * hi:.1f}%" in line
            # the confusion matrix: counts and row shares
            burst = last["confusion"][2]
            matrix = widget_text(app, "#confusion").splitlines()
            cells = next(x for x in matrix if x.strip("│ ").startswith("burst")).strip("│ ").split()
            shares = [f"{100 * c / sum(burst):.0f}%" for c in burst]
            assert cells == ["burst"] + [v for c, p in zip(burst, shares) for v in (f"{c:,}", p)]
            # the caution under the curve: about e^-1 of the members leave a row out (Breiman 1996)
            words = " ".join(widget_text(app, "#caution").split())
            assert "judged by only ~0.37 x members trees" in words and "textbook OOB error (faint) reads high" in words
            assert "(Bylander 2002; Janitza & Hornung 2018)" in words
            # this process's own figures, one line of the progress panel under the job's status
            side = widget_text(app, "#progress").splitlines()
            job = next(i for i, x in enumerate(side) if x.lstrip().startswith("job"))
            assert f"running · pid {os.getpid()}" in side[job]
            assert "cpu" in side[job + 1] and "MB" in side[job + 1] and "threads" in side[job + 1]
    run(go())


def test_a_run_grown_on_a_cluster_says_where(tmp_path):
    """The start line's cluster fields (written by a job growing members on Dask) become a settings row
    in place of the local threads; a run on threads says nothing of a cluster."""
    from tui.widgets.settings import SettingsPanel
    path = write_journal(tmp_path / "far", 40, members_target=100)
    lines = path.read_text().splitlines()
    start = json.loads(lines[0])
    start.update(cluster="tcp://10.0.0.5:8786", cluster_address="tcp://10.0.0.5:8786", cluster_workers=3,
                 cluster_threads=12)
    path.write_text("\n".join([json.dumps(start)] + lines[1:]) + "\n")
    write_journal(tmp_path / "near", 40, members_target=100)

    async def go(name):
        app = Dashboard(tmp_path / name)
        async with app.run_test(size=(140, 44)) as pilot:
            await settle(pilot, app, caught_up(app))
            return " ".join(widget_text(app, SettingsPanel).split())
    far, near = run(go("far")), run(go("near"))
    assert "grown on Dask, 3 workers scheduler tcp://10.0.0.5:8786 threads 12 on the workers" in far
    assert "threads 2" not in far
    assert "grown on" not in near and "Dask" not in near


def test_regression_run_shows_mse_and_r2(tmp_path):
    path = write_journal(tmp_path / "beta", 60, members_target=200, task="regression")
    last = last_line(path)

    async def go():
        app = Dashboard(tmp_path / "beta")
        async with app.run_test(size=(100, 32)) as pilot:
            await settle(pilot, app, caught_up(app))
            text = screen_text(app)
            assert "60 of 200" in text and "regression" in text
            assert f"{last['error']:.4g}" in text and f"{last['r2']:.4f}" in text
            assert "OOB MSE" in text and "by class" not in text and "confusion" not in text
            assert " 20 " in text and " 40 " in text    # member-axis ticks laid out for the plot's width
    run(go())


def test_crashed_job_is_said_in_words(tmp_path):
    pid, started = dead_pid()
    write_journal(tmp_path / "gamma", 30, members_target=100, pid=pid, pid_started=started)

    async def go():
        app = Dashboard(tmp_path / "gamma")
        async with app.run_test(size=(100, 32)) as pilot:
            await settle(pilot, app, caught_up(app))
            text = screen_text(app)
            assert "crashed: process gone, no end line" in text
            assert f"pid {pid} gone" in " ".join(widget_text(app, "#progress").split())
            assert app.status == "crashed"
            await pilot.press("s")                   # nothing to stop: no modal, no stop file
            await pilot.pause()
            assert not isinstance(app.screen, StopScreen) and not (tmp_path / "gamma" / "stop").exists()
    run(go())


@pytest.mark.parametrize("end,words", [("finished", "finished"), ("stopped", "stopped on request"),
                                       ("failed", "failed")])
def test_ended_jobs(tmp_path, end, words):
    pid, started = dead_pid()
    write_journal(tmp_path / "delta", 20, pid=pid, pid_started=started, end=end)

    async def go():
        app = Dashboard(tmp_path / "delta")
        async with app.run_test(size=(100, 32)) as pilot:
            await settle(pilot, app, caught_up(app))
            assert app.status == end
            assert words in screen_text(app)
    run(go())


def test_waiting_for_a_journal_that_does_not_exist_yet(tmp_path):
    (tmp_path / "eps").mkdir()

    async def go():
        app = Dashboard(tmp_path / "eps")
        async with app.run_test(size=(100, 32)) as pilot:
            await settle(pilot, app, caught_up(app))
            assert "waiting for the job's first line" in screen_text(app)
            write_journal(tmp_path / "eps", 7, members_target=50)
            await settle(pilot, app, lambda: app.view is not None and app.view.members == 7)
            assert "7 of 50" in screen_text(app)
    run(go())


# ---------------------------------------------------------------- following a growing journal

def test_follows_a_journal_growing_hundreds_of_lines_a_second(tmp_path):
    run_dir = tmp_path / "zeta"
    write_journal(run_dir, 10, members_target=5000)
    total = 10 + 900

    def writer():
        with JournalWriter(run_dir / JOURNAL) as w:
            for m in range(11, total + 1):
                w.write("member", **member_fields(m))
                if m % 6 == 0:
                    time.sleep(0.02)          # about 300 lines a second

    async def go():
        app = Dashboard(run_dir)
        async with app.run_test(size=(100, 32)) as pilot:
            await settle(pilot, app, caught_up(app))
            seen = set()
            th = threading.Thread(target=writer)
            th.start()
            while th.is_alive():
                await pilot.pause(0.1)
                seen.add(app.view.members)
            await settle(pilot, app, lambda: app.view.members == total)
            assert f"{total} of 5,000" in screen_text(app)
            # it moved along with the writer, not only at the end
            assert len([m for m in seen if 10 < m < total]) >= 2
            assert app.tail.reader.malformed == 0
    run(go())


def test_replaced_journal_is_read_again(tmp_path):
    run_dir = tmp_path / "eta"
    write_journal(run_dir, 40, members_target=100)

    async def go():
        app = Dashboard(run_dir)
        async with app.run_test(size=(100, 32)) as pilot:
            await settle(pilot, app, caught_up(app))
            assert app.view.members == 40
            other = tmp_path / "other"
            write_journal(other, 12, members_target=30)
            os.replace(other / JOURNAL, run_dir / JOURNAL)
            await settle(pilot, app, lambda: app.view.members == 12)
            assert "12 of 30" in screen_text(app) and app.tail.reader.restarts == 1
    run(go())


def test_a_tick_while_the_panels_are_taken_down_draws_nothing(tmp_path):
    # At exit Textual takes the widgets down while a timer can still fire; a redraw then met a
    # frame without a parent (AttributeError, seen once in CI). Taking one frame down by hand
    # puts the app in that state.
    run_dir = tmp_path / "iota"
    write_journal(run_dir, 25, members_target=100)

    async def go():
        app = Dashboard(run_dir)
        async with app.run_test(size=(100, 32)) as pilot:
            await settle(pilot, app, caught_up(app))
            n = app.redraws
            app.redraw()
            assert app.redraws == n + 1                  # a normal redraw draws
            await app.panel(ClassPanel).parent.remove()
            app.redraw()
            app.tick()
            assert app.redraws == n + 1                  # and one after a panel left draws nothing
    run(go())


# ---------------------------------------------------------------- keys

def test_stop_key_asks_then_writes_the_stop_file(tmp_path):
    run_dir = tmp_path / "theta"
    write_journal(run_dir, 25, members_target=100)

    async def go():
        app = Dashboard(run_dir)
        async with app.run_test(size=(100, 32)) as pilot:
            await settle(pilot, app, caught_up(app))
            await pilot.press("s")
            await pilot.pause()
            assert isinstance(app.screen, StopScreen)
            await pilot.press("n")                      # no: nothing written
            await pilot.pause()
            assert not isinstance(app.screen, StopScreen) and not (run_dir / "stop").exists()
            await pilot.press("s")
            await pilot.pause()
            await pilot.press("enter")                   # the focused button is "keep going"
            await pilot.pause()
            assert not (run_dir / "stop").exists()
            await pilot.press("s")
            await pilot.pause()
            await pilot.press("y")
            await settle(pilot, app, lambda: (run_dir / "stop").exists())
            await settle(pilot, app, lambda: "stop asked" in screen_text(app))
    run(go())


def test_log_class_and_help_keys(tmp_path):
    run_dir = tmp_path / "iota"
    write_journal(run_dir, 300, members_target=300)

    async def go():
        app = Dashboard(run_dir)
        async with app.run_test(size=(120, 40)) as pilot:
            await settle(pilot, app, caught_up(app))
            assert "members axis: linear" in screen_text(app)
            await pilot.press("l")
            await pilot.pause()
            text = screen_text(app)
            assert app.log_x and "members axis: log" in text
            assert " 10 " in text and " 100 " in text            # decade ticks on the member axis
            seen = []
            for _ in range(4):
                await pilot.press("c")
                await pilot.pause()
                seen.append(app.highlight)
            assert seen == [0, 1, 2, None]                        # each class in turn, then none
            await pilot.press("question_mark")
            await pilot.pause()
            assert isinstance(app.screen, HelpScreen)
            keys = widget_text(app, "#help-keys").splitlines()
            for key, words in [("q", "leave"), ("s", "stop"), ("l", "log"), ("r", "textbook"), ("c", "class"),
                               ("?", "list")]:
                assert any(line.strip("│ ").startswith(key + " ") and words in line for line in keys), key
            await pilot.press("escape")
            await pilot.pause()
            assert not isinstance(app.screen, HelpScreen)
            await pilot.press("q")
            await pilot.pause()
        assert app.return_code in (0, None)
    run(go())


def test_estimated_curve_its_limit_needed_members_and_the_textbook_toggle(tmp_path):
    # a real run's journal (in this process): refit lines carry the estimated curve over sizes, and
    # the end line the saved ensemble's own; the dashboard draws from them, and r hides the textbook
    import baggr
    from baggr.runs.journal import read_state
    from generators import waveform
    run_dir = tmp_path / "kappa"
    run_dir.mkdir()
    X, y = waveform(400, seed=3)
    lines = []
    with JournalWriter(run_dir / JOURNAL) as w:
        w.write("start", **start_fields(members_target=70, classes=["0", "1", "2"], class_rows=[
            int(v) for v in np.bincount(y, minlength=3)]))

        def on_member(ev):
            f = ev.journal_fields()
            lines.append(f)
            w.write("member", **f)
        ens = baggr.train(X, y, baggr.Config(members=70, seed=2, threads=1), on_member=on_member)
        from baggr.events import MemberEvent
        w.write("end", status="finished", reason="reached 70 members", member=70, elapsed=1.0,
                estimate=MemberEvent.estimate_fields(ens.oob.figures(70)))
    refits = [f for f in lines if "curve" in f]
    assert [f["member"] for f in refits] == [32, 64]            # refits as members double, from 32
    before = read_state(run_dir)
    # the end line's estimate (the saved ensemble, over every row) is what the journal leaves
    assert before.fit["member"] == 70 and before.members_needed == ens.oob.members_needed
    assert before.error == ens.oob.error and before.error_limit == ens.oob.error_limit
    assert before.fit["error"][0] == pytest.approx(ens.oob.curve[0], rel=1e-5)

    async def go():
        app = Dashboard(run_dir)
        async with app.run_test(size=(120, 40)) as pilot:
            await settle(pilot, app, caught_up(app))
            key = " ".join(widget_text(app, "#curve-key").split())
            need = ens.oob.members_needed
            assert f"limit {100 * ens.oob.error_limit:.2f}% · needed {need:,}" in key and "textbook" in key
            words = " ".join(widget_text(app, "#caution").split())
            assert "textbook OOB error (faint) reads high" in words and "kept ensemble's error" in words
            assert "r textbook curve: shown" in screen_text(app)
            await pilot.press("r")
            await pilot.pause()
            assert not app.show_raw and "r textbook curve: hidden" in screen_text(app)
            assert "textbook" not in " ".join(widget_text(app, "#curve-key").split())
    run(go())


# ---------------------------------------------------------------- a long journal, sizes, no colour

def fast_journal(run_dir, members: int):
    """A long journal written as text directly (JournalWriter would take seconds for 100,000 lines)."""
    run_dir.mkdir(parents=True)
    me = psutil.Process()
    start = {"event": "start", "t": 1.0, **start_fields(members_target=2 * members, pid=me.pid,
                                                       pid_started=me.create_time())}
    rows = []
    for m in range(1, members + 1):
        e = 0.1 + 1.0 / (m + 9)
        rows.append(f'{{"event":"member","t":{1 + m * 0.01:.3f},"member":{m},"elapsed":{m * 0.01:.2f},'
                    f'"error":{e!r},"interval":[{e - 0.01!r},{e + 0.01!r}],'
                    f'"class_error":[{e / 2!r},{e!r},{2 * e!r}],"coverage":1.0,"oob_rows":368,'
                    f'"confusion":[[650,25,25],[35,149,36],[23,22,35]],"rate":50.0}}')
    (run_dir / JOURNAL).write_text(json.dumps(start) + "\n" + "\n".join(rows) + "\n")
    return 0.1 + 1.0 / (members + 9)


def test_long_journal_opens_with_the_whole_history(tmp_path):
    # The time it takes is measured in bench/dashboard.py; here: the numbers are right.
    err = fast_journal(tmp_path / "kappa", 100_000)

    async def go():
        app = Dashboard(tmp_path / "kappa")
        async with app.run_test(size=(120, 40)) as pilot:
            await settle(pilot, app, caught_up(app), timeout=60)
            text = screen_text(app)
            assert "100,000 of 200,000" in text and f"{100 * err:.2f}%" in text
            state = app.tail.state
            assert len(state.curve_member) == 100_000 and state.curve_member[-1] == 100_000
            xs, _ = app.view.curves["error"]
            assert xs[0] == 1 and xs[-1] == 100_000 and len(xs) <= 2 * 120   # drawn from a few points
            assert "100,000" in text.split("members axis")[0]               # the last tick of the axis
    run(go())


@pytest.mark.parametrize("size", [(80, 24), (120, 40)])
def test_main_screen_capture(tmp_path, size):
    path = write_journal(tmp_path / "lambda", 150, members_target=600)
    last = last_line(path)

    async def go():
        app = Dashboard(tmp_path / "lambda")
        async with app.run_test(size=size) as pilot:
            await settle(pilot, app, caught_up(app))
            text = screen_text(app)
            (tmp_path / f"screen-{size[0]}x{size[1]}.txt").write_text(text)
            lines = text.splitlines()
            assert len(lines) == size[1] and max(len(x) for x in lines) <= size[0]
            for label in ("progress", "members", "pace", "elapsed", "to go", "covered", "pid",
                          "OOB error", "by class", "confusion", "95% interval", "Bylander 2002",
                          "q leave", "s stop job", "l members axis: linear", "c next class", "? keys"):
                assert label in text, label
            assert "150 of 600" in text and f"{100 * last['error']:.2f}%" in text
            for name in CLASSES:
                assert f"━━ {name}" in text
            if size[0] >= 100:
                assert "covered" in lines[next(i for i, x in enumerate(lines) if "95% interval" in x)]
                assert "row %" in text                      # room for the row shares of the matrix
    run(go())


def test_renders_without_colour(tmp_path, monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    write_journal(tmp_path / "mu", 80, members_target=100)

    async def go():
        app = Dashboard(tmp_path / "mu")
        async with app.run_test(size=(100, 32)) as pilot:
            await settle(pilot, app, caught_up(app))
            assert app.no_color
            text = screen_text(app)
            # lines told apart by their marks instead of colours
            assert "@ all" in text and ". 95%" in text
            for k, name in enumerate(CLASSES):
                assert f"{k + 1} {name}" in text
            assert "80 of 100" in text
    run(go())


def test_opening_read_in_a_child_then_tailing_goes_on(tmp_path):
    import threading as th
    from tui.opening import MIN_BYTES, Opening
    from tui.tail import Tail
    run_dir = tmp_path / "xi"
    err = fast_journal(run_dir, 20_000)
    assert (run_dir / JOURNAL).stat().st_size >= MIN_BYTES
    if th.active_count() > 1:
        pytest.skip("another thread runs here: the opening read would not fork")
    opening = Opening(run_dir)
    assert opening._proc is not None
    posted = []
    tail = Tail(run_dir, posted.append, poll=0.02, opening=opening)
    tail.start()
    try:
        assert tail.caught_up.wait(60)
        with tail.lock:
            assert tail.state.members == 20_000 and tail.state.error == pytest.approx(err)
            assert len(tail.state.curve_member) == 20_000
        with JournalWriter(run_dir / JOURNAL) as w:       # the job goes on: the parent reads on from there
            w.write("member", **member_fields(20_001))
        deadline = time.monotonic() + 20
        while tail.state.members != 20_001 and time.monotonic() < deadline:
            time.sleep(0.02)
        assert tail.state.members == 20_001 and len(tail.state.curve_member) == 20_001
        assert tail.reader.malformed == 0
    finally:
        tail.stop()


def test_clock_is_injectable_elapsed_and_time_to_go(tmp_path):
    path = write_journal(tmp_path / "omicron", 50, members_target=200)
    last = last_line(path)

    async def go():
        # 75 s after the last member line: the clock goes on between lines while the job runs.
        app = Dashboard(tmp_path / "omicron", get_time=lambda: last["t"] + 75.0)
        async with app.run_test(size=(100, 32)) as pilot:
            await settle(pilot, app, caught_up(app))
            side = widget_text(app, "#side")
            assert last["elapsed"] == pytest.approx(10.0)
            assert "1m 25s" in side                        # 10 s of training + 75 s since
            # members left over the rate: (200 - 50) / 5 per second (arithmetic, common practice)
            assert "about 30s" in side
    run(go())


# ---------------------------------------------------------------- figures that read right (issue 15)

def test_a_long_reason_wraps_between_words_and_a_finished_run_says_its_model_is_saved(tmp_path):
    # "finished: reached 3000 members" is wider than the progress panel: cut, it read "reached 300…".
    # The last checkpoint line (2,800) is older than the end: a finished job saves the model of all
    # its members (baggr/runs/job.py), which is what the panel must say it saved.
    pid, started = dead_pid()
    write_journal(tmp_path / "xi", 3000, members_target=3000, end="finished", pid=pid, pid_started=started,
                  checkpoint_every=400)

    async def go():
        app = Dashboard(tmp_path / "xi")
        async with app.run_test(size=(80, 24)) as pilot:
            await settle(pilot, app, lambda: app.first_full_draw is not None and app.status == "finished")
            lines = widget_text(app, "ProgressPanel").splitlines()
            job = next(i for i, x in enumerate(lines) if x.lstrip().startswith("job"))
            words = " ".join(" ".join(x.split()) for x in lines[job:job + 2])
            assert "finished: reached 3000 members" in words.replace("job ", "", 1)
            assert not any("…" in x for x in lines)
            saved = next(x for x in lines if x.lstrip().startswith("saved"))
            assert "model at 3,000 members" in saved and "2,800" not in saved
    run(go())


def test_wrap_breaks_between_words_only():
    from tui.widgets.progress import wrap
    text = "finished: reached 3000 members after 12,345 seconds"
    for width in (10, 14, 22, 30):
        lines = wrap(text, width, most=10)
        assert all(len(x) <= width for x in lines)
        assert " ".join(lines).split() == text.split()        # every word whole, none cut
    cut = wrap(text, 12, most=2)
    assert len(cut) == 2 and cut[-1].endswith("…") and set(" ".join(cut)[:-1].split()) <= set(text.split())


def test_the_stop_question_follows_the_job_while_it_asks(tmp_path):
    run_dir = tmp_path / "pi"
    write_journal(run_dir, 554, members_target=3000)

    async def go():
        app = Dashboard(run_dir)
        async with app.run_test(size=(80, 24)) as pilot:
            await settle(pilot, app, caught_up(app))
            await pilot.press("s")
            await pilot.pause()
            assert isinstance(app.screen, StopScreen)
            assert "the job is at 554 of 3,000" in " ".join(screen_text(app).split())
            with JournalWriter(run_dir / JOURNAL) as w:     # the job goes on while the question is open
                for m in range(555, 635):
                    w.write("member", **member_fields(m))
            await settle(pilot, app, lambda: "the job is at 634 of 3,000" in " ".join(screen_text(app).split()))
            assert app.view.members == 634
            # the project's own frame over the progress column, not the framework's buttons
            from textual.widgets import Button
            assert not app.screen.query(Button)
            assert app.screen.query_one("#stop-box").border_title == "stop the job?"
            await pilot.press("escape")
            await pilot.pause()
            assert not isinstance(app.screen, StopScreen) and not (run_dir / "stop").exists()
    run(go())


def test_one_pace_format_and_percentages_on_the_screen(tmp_path):
    # 1,440 members a second read "1.44e+03 members/s" beside "1603.15 members/s" in the plain lines.
    write_journal(tmp_path / "rho", 60, members_target=100, rate=1440.0)
    from baggr.units import pace

    async def go():
        app = Dashboard(tmp_path / "rho")
        async with app.run_test(size=(100, 30)) as pilot:
            await settle(pilot, app, caught_up(app))
            side = widget_text(app, "#progress")
            assert "1,440 members/s" in side and "e+" not in side
            assert pace(1440.0) == "1,440 members/s" and pace(1603.15) == "1,603 members/s"
            assert "100.0% of rows" in side                      # coverage as a percentage
    run(go())


# ---------------------------------------------------------------- keys, Ctrl-C, no colour (issue 15)

def test_ctrl_c_leaves_the_dashboard_without_the_frameworks_notice(tmp_path):
    write_journal(tmp_path / "sigma", 30, members_target=100)

    async def go():
        app = Dashboard(tmp_path / "sigma")
        async with app.run_test(size=(80, 24)) as pilot:
            await settle(pilot, app, caught_up(app))
            await pilot.press("s")                        # even from the stop question
            await pilot.pause()
            await pilot.press("ctrl+c")
            await pilot.pause()
            assert not any("ctrl+q" in str(n.message) for n in app._notifications)
        assert app.return_code == 0 and not (tmp_path / "sigma" / "stop").exists()
    run(go())


def test_keys_sit_on_what_they_act_on_and_the_class_key_only_where_there_are_classes(tmp_path):
    from textual.widgets import Footer
    write_journal(tmp_path / "tau", 40, members_target=100)
    write_journal(tmp_path / "upsilon", 40, members_target=100, task="regression")

    async def classes():
        app = Dashboard(tmp_path / "tau")
        async with app.run_test(size=(80, 24)) as pilot:
            await settle(pilot, app, caught_up(app))
            assert not app.screen.query(Footer)          # no bar of keys at the bottom
            lines = screen_text(app).splitlines()
            assert "q leave" in lines[0] and "? keys" in lines[0]
            for widget, caption in (("#curve", "l members axis: linear"), ("#classes-box", "c next class"),
                                    ("#side", "s stop job")):
                r = app.screen.query_one(widget).region
                assert caption in lines[r.y + r.height - 1][r.x:r.x + r.width], caption   # on its frame's edge

    async def regression():
        app = Dashboard(tmp_path / "upsilon")
        async with app.run_test(size=(80, 24)) as pilot:
            await settle(pilot, app, caught_up(app))
            assert "next class" not in screen_text(app)
            await pilot.press("c")
            await pilot.pause()
            assert app.highlight is None and not app._notifications
            await pilot.press("question_mark")
            await pilot.pause()
            keys = widget_text(app, "#help-keys")
            assert "leave" in keys and "class" not in keys
    run(classes())
    run(regression())


def test_the_highlighted_class_stands_out_without_colour(tmp_path, monkeypatch):
    # NO_COLOR: the classes were told apart by their marks alone, so a highlight that only dims the
    # others' colour showed nothing. Now only the highlighted class keeps its mark in the plot.
    monkeypatch.setenv("NO_COLOR", "1")
    write_journal(tmp_path / "phi", 80, members_target=100)

    async def go():
        app = Dashboard(tmp_path / "phi")
        async with app.run_test(size=(100, 32)) as pilot:
            await settle(pilot, app, caught_up(app))
            from tui.widgets.curve import render_curves

            def marks():
                """Characters drawn in the plot's cells (each line's first run is its y label; the last line the x labels)."""
                return set("".join(t for ln in render_curves(app.view, True, 60, 16)[:-1] for t, _ in ln[1:]))
            assert {"1", "2", "3", "@"} <= marks()
            await pilot.press("c")
            await pilot.press("c")                          # the second class: "drift", mark 2
            await pilot.pause()
            assert app.highlight == 1
            drawn = marks()
            assert "2" in drawn and "@" in drawn and not drawn & {"1", "3"}
            assert any(0x2800 < ord(ch) <= 0x28FF for ch in drawn)   # the others as plain braille dots
            key = widget_text(app, "#curve-key")
            assert "2 drift" in key and "1 calm" not in key and "3 burst" not in key
            table = widget_text(app, "#classes")
            row = next(x for x in table.splitlines() if "drift" in x)
            assert "2 drift" in row
    run(go())


def test_plot_and_tables_follow_at_most_the_share_of_a_core_they_are_given():
    # The rule of tui/app.py (common practice for a guest process, no source): a drawing costing
    # c seconds of CPU comes back every c / HEAVY_SHARE seconds, within [TABLES_EVERY, TABLES_MOST].
    from tui import app as dash
    a = Dashboard.__new__(Dashboard)
    for cost, every in ((0.001, dash.TABLES_EVERY), (0.012, 0.012 / dash.HEAVY_SHARE), (1.0, dash.TABLES_MOST)):
        start = time.thread_time() - cost
        a._heavy_done(start)
        assert a.tables_every == pytest.approx(every, rel=0.05, abs=0.05)
