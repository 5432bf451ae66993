"""The dashboard on a run with --measure and --importance: the chosen measure, the m key, the importance panel."""
import json
import subprocess
import sys

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv

from generators import waveform
from test_tui import caught_up, run, screen_text, settle, widget_text
from tui.app import Dashboard


def test_chosen_measure_m_key_and_importance_panel(tmp_path):
    X, y = waveform(400, seed=5)
    pacsv.write_csv(pa.table({**{f"w{i}": X[:, i] for i in range(21)}, "shape": np.array(list("pqr"))[y]}),
                    tmp_path / "w.csv")
    r = subprocess.run([sys.executable, "-m", "baggr.cli", "train", str(tmp_path / "w.csv"), "--target", "shape",
                        "--members", "60", "--measure", "auc", "--importance", "--no-ui", "--run-dir",
                        str(tmp_path / "run")], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    lines = [json.loads(x) for x in (tmp_path / "run" / "journal.jsonl").read_text().splitlines()]
    last = [d for d in lines if d["event"] == "member" and "measures" in d][-1]
    assert last["member"] == 57          # the scheduled sizes: ..., 53, 57, 62
    auc = last["measures"]["auc"][0]
    imp = last["importance"]["mean"]
    names = [f"w{i}" for i in range(21)]
    top = names[int(np.argmax(imp))]

    async def go():
        app = Dashboard(tmp_path / "run")
        async with app.run_test(size=(130, 44)) as pilot:
            await settle(pilot, app, caught_up(app))
            text = screen_text(app)
            assert "AUC by ensemble size" in text                    # the run's chosen measure on the curve
            side = widget_text(app, "#side")
            assert any(line.strip("│ ").startswith("AUC") and f"{auc:.4g}" in line for line in side.splitlines())
            # the importance panel: the largest mean first, as the journal's last point has it
            panel = widget_text(app, "#importance").splitlines()
            first = next(x for x in panel if x.strip("│ ").startswith("w"))
            assert first.strip("│ ").split()[0] == top and f"{max(imp):.4f}" in first
            shown = []
            for _ in range(3):
                await pilot.press("m")
                await pilot.pause()
                shown.append(app.measure)
            assert shown == ["error", "balanced-error", "log-loss"]   # on from the chosen one, in turn
            assert "log loss by ensemble size" in screen_text(app)
            await pilot.press("m")
            await pilot.press("m")
            await pilot.pause()
            assert app.measure == "auc"
    run(go())


def test_the_chosen_measure_shows_its_estimate_for_the_kept_ensemble(tmp_path):
    # --measure brier: the side panel's figure is the saved ensemble's estimate (the end line's), the
    # curve key names the textbook points, the limit and the members needed (issue 12 item 6 for a
    # measure; common practice, no source)
    X, y = waveform(400, seed=6)
    pacsv.write_csv(pa.table({**{f"w{i}": X[:, i] for i in range(21)}, "shape": np.array(list("pqr"))[y]}),
                    tmp_path / "w.csv")
    r = subprocess.run([sys.executable, "-m", "baggr.cli", "train", str(tmp_path / "w.csv"), "--target", "shape",
                        "--members", "60", "--measure", "brier", "--no-ui", "--run-dir", str(tmp_path / "run")],
                       capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    lines = [json.loads(x) for x in (tmp_path / "run" / "journal.jsonl").read_text().splitlines()]
    est = [d for d in lines if d["event"] == "end"][-1]["estimate"]["measure_estimate"]
    raw = [d for d in lines if d["event"] == "member" and "measures" in d][-1]["measures"]["brier"][0]
    assert est["name"] == "brier" and abs(est["value"] - raw) > 5e-5     # the two differ at 4 figures

    async def go():
        app = Dashboard(tmp_path / "run")
        async with app.run_test(size=(130, 44)) as pilot:
            await settle(pilot, app, caught_up(app))
            side = widget_text(app, "#side")
            line = next(x for x in side.splitlines() if x.strip("│ ").startswith("Brier"))
            assert f"{est['value']:.4g} (" in line, line
            key = widget_text(app, "#curve-key")
            assert "textbook" in key and f"limit {est['limit']:.4g}" in key
            assert f"needed {est['members_needed']:,}" in key
    run(go())
