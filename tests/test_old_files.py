"""Files written before the package move (tests/data/v1, made by the code of 61806a8) still load,
report and resume: a model file and a crashed run directory (killed at member 14, checkpoint at 5,
a torn temporary chunk file beside it)."""
import json
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pyarrow.csv as pacsv
import pytest

from baggr.model.ensemble import load
from model_files import read_joined

V1 = Path(__file__).parent / "data" / "v1"
BAGGR = [sys.executable, "-m", "baggr.cli"]


def _table():
    t = pacsv.read_csv(V1 / "twonorm_small.csv")
    return t.drop(["label"]), t.column("label").to_pylist()


def test_old_model_file_loads_and_scores_as_before():
    ens = load(V1 / "model_v1.npz")
    X, _ = _table()
    assert ens.members == 12 and ens.classes == ["no", "yes"]
    # the shares the old code computed for the same rows, saved beside the model
    np.testing.assert_array_equal(ens.vote_shares(X), np.load(V1 / "model_v1_shares.npy"))


def _copy_run(tmp_path) -> Path:
    data = tmp_path / "twonorm_small.csv"
    shutil.copy(V1 / "twonorm_small.csv", data)
    run = tmp_path / "run_v1"
    shutil.copytree(V1 / "run_v1", run)
    cfg = json.loads((run / "config.json").read_text())
    cfg["data"]["path"] = str(data)          # the run moved with its data file (same bytes, same hash)
    (run / "config.json").write_text(json.dumps(cfg))
    return run


def test_old_run_reports_and_resumes_bit_identically(tmp_path):
    run = _copy_run(tmp_path)
    r = subprocess.run(BAGGR + ["report", str(run), "--json"], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    assert json.loads(r.stdout)["members"] == 5          # the checkpoint's members
    r = subprocess.run(BAGGR + ["resume", str(run), "--no-ui"], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    fresh = tmp_path / "fresh"
    r = subprocess.run(BAGGR + ["train", str(tmp_path / "twonorm_small.csv"), "--target", "label", "--members", "20",
                                "--seed", "3", "--threads", "1", "--no-ui", "--run-dir", str(fresh)],
                       capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    a, b = load(run / "model.npz"), load(fresh / "model.npz")
    assert a.members == b.members == 20
    ta, tb = read_joined(run / "model.npz")[1], read_joined(fresh / "model.npz")[1]
    for k in (k for k in ta if k.startswith("tree")):   # the trees, whatever parts the checkpoints made
        np.testing.assert_array_equal(ta[k], tb[k], err_msg=k)
    for k, v in a.oob.arrays().items():
        if k.startswith("measure_"):
            continue     # the old checkpoint had no measure curve: it has points from the resume on
        np.testing.assert_array_equal(v, b.oob.arrays()[k], err_msg=k)
    sizes = a.oob.arrays()["measure_sizes"]
    assert sizes[0] == 6 and np.array_equal(b.oob.arrays()["measure_values"][5:], a.oob.arrays()["measure_values"])


def _copy_v2_run(tmp_path, name) -> Path:
    data = tmp_path / "twonorm_small.csv"
    shutil.copy(V1 / "twonorm_small.csv", data)
    run = tmp_path / name
    shutil.copytree(V1.parent / "v2" / name, run)
    cfg = json.loads((run / "config.json").read_text())
    cfg["data"]["path"] = str(data)          # the run moved with its data file (same bytes, same hash)
    (run / "config.json").write_text(json.dumps(cfg))
    return run


@pytest.mark.parametrize("name", ["run_v2", "run_v2_stopped"])
def test_runs_of_the_chunk_file_days_resume_bit_identically(tmp_path, name):
    # tests/data/v2/README.md: checkpoints at 10 members with chunk files, or naming a version-2 model
    run = _copy_v2_run(tmp_path, name)
    r = subprocess.run(BAGGR + ["resume", str(run), "--no-ui"], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    fresh = tmp_path / "fresh"
    r = subprocess.run(BAGGR + ["train", str(tmp_path / "twonorm_small.csv"), "--target", "label", "--members", "20",
                                "--seed", "3", "--threads", "1", "--no-ui", "--run-dir", str(fresh)],
                       capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    ha, ta = read_joined(run / "model.npz")
    hb, tb = read_joined(fresh / "model.npz")
    assert ha["format_version"] == 3 and sorted(ta) == sorted(tb)
    for k in ta:
        np.testing.assert_array_equal(ta[k], tb[k], err_msg=k)
    assert not (run / "members").exists() and not (run / "checkpoint.npz").exists()
