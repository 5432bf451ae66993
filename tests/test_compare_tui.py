"""The comparison's board (`baggr watch COMPARISON_DIR` on a terminal): every candidate's curve and the
ranked table from the journals; Enter opens a candidate's dashboard, Escape there comes back."""
import asyncio
import contextlib
import io
import json

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pytest

from baggr.cli import main as cli
from tui.app import Dashboard
from tui.compare import Board, candidate_dir
from test_tui import screen_text, settle


@pytest.fixture(scope="module")
def comparison(tmp_path_factory):
    d = tmp_path_factory.mktemp("board")
    rng = np.random.default_rng(4)
    X = rng.normal(size=(400, 5))
    y = np.where(X[:, 0] + X[:, 1] + rng.normal(size=400) > 0, "yes", "no")
    pacsv.write_csv(pa.table({**{f"f{j}": X[:, j] for j in range(5)}, "label": y}), d / "d.csv")
    with contextlib.redirect_stdout(io.StringIO()):
        assert cli.main(["compare", str(d / "d.csv"), "--target", "label", "--min-leaf", "1,8,40", "--members", "30",
                         "--block", "10", "--run-dir", str(d / "cmp"), "--no-ui"]) == 0
    return d / "cmp"


def last_error(run_dir):
    """The journal's latest error: a finished run's end line carries the saved ensemble's estimate."""
    lines = [json.loads(x) for x in (run_dir / "journal.jsonl").read_text().splitlines()]
    end = [x for x in lines if x["event"] == "end" and "estimate" in x]
    return end[-1]["estimate"]["error"] if end else [x for x in lines if x["event"] == "member"][-1]["error"]


def test_board_ranks_the_candidates_by_their_journals_and_enter_opens_one(comparison):
    errors = {n: last_error(candidate_dir(comparison, n)) for n in (1, 2, 3)}
    order = sorted(errors, key=lambda n: (errors[n], n))

    async def go():
        app = Board(comparison)
        async with app.run_test(size=(100, 32)) as pilot:
            await settle(pilot, app, lambda: len(app.rows) == 3 and app.rows[0]["error"] is not None)
            assert [r["number"] for r in app.rows] == order
            text = screen_text(app)
            assert "finished" in text and "min_leaf=40" in text and "30/30" in text
            assert "⠀" in text or any(0x2800 < ord(ch) <= 0x28FF for ch in text)      # braille curves drawn
            await pilot.press("down")
            await pilot.press("enter")
            await pilot.pause()
        return app.return_value
    # the selection starts on candidate 1 and moves down the ranked table
    assert asyncio.run(go()) == order[min(order.index(1) + 1, 2)]


def test_a_candidates_dashboard_opened_from_the_board_goes_back_with_escape(comparison):
    async def go():
        app = Dashboard(candidate_dir(comparison, 2), back=True)
        async with app.run_test(size=(100, 32)) as pilot:
            await settle(pilot, app, lambda: app.first_full_draw is not None)
            assert "Esc back to the comparison" in screen_text(app)      # its caption, on the top line
            await pilot.press("escape")
            await pilot.pause()
        return app.return_value
    assert asyncio.run(go()) == "back"
