"""Growing a trained ensemble to more members, and scoring with its first K: both must equal a run of
that many members from the start (members are pure functions of (data, config, seed, m); DESIGN.md)."""
import json
import os
import subprocess
import sys

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pytest

import baggr
from model_files import read_joined
from generators import friedman1, noisy_halves, waveform

BAGGR = [sys.executable, "-m", "baggr.cli"]
TIMES = {"grow_seconds", "fold_seconds", "keep_seconds", "seconds", "measure_seconds", "importance_seconds"}


def _same_files(a, b):
    """Two model files hold the same arrays bit for bit and the same header apart from times."""
    ha, aa = read_joined(a)
    hb, ab = read_joined(b)
    assert sorted(aa) == sorted(ab)
    for k in aa:
        assert aa[k].dtype == ab[k].dtype and np.array_equal(aa[k], ab[k], equal_nan=True), k
    for k in set(ha) | set(hb):
        if k == "created":
            continue
        if k == "stats":
            assert {x: v for x, v in ha[k].items() if x not in TIMES} == {x: v for x, v in hb[k].items() if x not in TIMES}
        else:
            assert ha[k] == hb[k], k


@pytest.mark.parametrize("make,vote", [(waveform, "hard"), (waveform, "shares"), (friedman1, "hard")])
def test_grow_equals_a_run_of_that_many_members(make, vote, tmp_path):
    X, y = make(300, seed=41)
    cfg = baggr.Config(members=23, seed=6, vote=vote, threads=2)
    listen = lambda ev: None  # noqa: E731  (a listener: the run refits its live estimate as a job does)
    small = baggr.train(X, y, cfg, on_member=listen)
    small.save(tmp_path / "small.npz")
    grown = baggr.grow(baggr.load(tmp_path / "small.npz"), X, y, 57, on_member=listen)
    full = baggr.train(X, y, cfg.replace(members=57), on_member=listen)
    grown.save(tmp_path / "grown.npz")
    full.save(tmp_path / "full.npz")
    _same_files(tmp_path / "grown.npz", tmp_path / "full.npz")
    np.testing.assert_array_equal(grown.oob.curve, full.oob.curve)
    assert grown.oob.members_needed == full.oob.members_needed


def test_grow_refuses_other_data_and_fewer_members():
    X, y = waveform(200, seed=42)
    ens = baggr.train(X, y, baggr.Config(members=5, seed=1))
    X2 = X.copy()
    X2[3, 4] += 10.0
    with pytest.raises(baggr.DataError, match="not the table"):
        baggr.grow(ens, X2, y, 9)
    with pytest.raises(baggr.ConfigError, match="above the ensemble's 5"):
        baggr.grow(ens, X, y, 5)


@pytest.mark.parametrize("make", [waveform, friedman1])
def test_first_k_members_score_as_a_k_member_run(make):
    X, y = make(300, seed=43)
    Xn, _ = make(500, seed=44)
    big = baggr.train(X, y, baggr.Config(members=30, seed=8))
    small = baggr.train(X, y, baggr.Config(members=11, seed=8))
    np.testing.assert_array_equal(big.predict(Xn, members=11), small.predict(Xn))
    if big.task == "classes":
        np.testing.assert_array_equal(big.vote_shares(Xn, members=11), small.vote_shares(Xn))
    with pytest.raises(baggr.BaggrError, match="from 1 to 30"):
        big.predict(Xn, members=31)


# ---------------------------------------------------------------- the command

def _baggr(*args):
    r = subprocess.run([*BAGGR, *map(str, args)], capture_output=True, text=True, timeout=300, env=dict(os.environ))
    return r


@pytest.fixture(scope="module")
def table(tmp_path_factory):
    """A table and a run of 45 members on it (the run the grown and cut ones must equal)."""
    d = tmp_path_factory.mktemp("grow")
    cols = noisy_halves(600, seed=9)
    path = d / "d.csv"
    pacsv.write_csv(pa.table(cols), path)
    r = _baggr("train", path, "--target", "label", "--members", 45, "--run-dir", d / "full", "--no-ui", "--seed", 4)
    assert r.returncode == 0, r.stderr
    return d, path


def _report(rd):
    fig = json.loads(_baggr("report", rd, "--json").stdout)
    for k in ("elapsed", "path", "status", "reason", "created", "cautions"):
        fig.pop(k, None)
    return fig


def test_resume_members_grows_a_finished_run_bit_for_bit(table):
    d, data = table
    r = _baggr("train", data, "--target", "label", "--members", 20, "--run-dir", d / "grown", "--no-ui", "--seed", 4)
    assert r.returncode == 0, r.stderr
    r = _baggr("resume", d / "grown", "--members", 45, "--no-ui")
    assert r.returncode == 0, r.stderr
    _same_files(d / "grown" / "model.npz", d / "full" / "model.npz")
    assert _report(d / "grown") == _report(d / "full")
    # not more than it has: one line, exit 2
    r = _baggr("resume", d / "grown", "--members", 45, "--no-ui")
    assert r.returncode == 2 and r.stderr.startswith("baggr: error: --members 45 must be above")


def test_resume_members_grows_a_stopped_run_bit_for_bit(table):
    d, data = table
    rd = d / "stopped"
    env = dict(os.environ, BAGGR_FAULT_KILL="member:12")
    r = subprocess.run([*BAGGR, "train", str(data), "--target", "label", "--members", "30", "--run-dir", str(rd),
                        "--no-ui", "--seed", "4", "--checkpoint-every", "5"], capture_output=True, text=True,
                       timeout=300, env=env)
    assert r.returncode != 0            # killed at member 12, after checkpoints at 5 and 10
    r = _baggr("resume", rd, "--members", 45, "--no-ui")
    assert r.returncode == 0, r.stderr
    _same_files(rd / "model.npz", d / "full" / "model.npz")


def test_predict_members_scores_as_a_k_member_run(table):
    d, data = table
    rd = d / "k"
    r = _baggr("train", data, "--target", "label", "--members", 20, "--run-dir", rd, "--no-ui", "--seed", 4)
    assert r.returncode == 0, r.stderr
    a, b = d / "a.csv", d / "b.csv"
    assert _baggr("predict", d / "full", data, "--members", 20, "--out", a).returncode == 0
    assert _baggr("predict", rd, data, "--out", b).returncode == 0
    assert a.read_bytes() == b.read_bytes()
    r = _baggr("predict", d / "full", data, "--members", 0, "--out", d / "c.csv")
    assert r.returncode == 2 and "--members must be from 1 to 45" in r.stderr
