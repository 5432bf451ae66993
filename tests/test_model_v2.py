"""Model files of format version 2 (made by baggr at commit 1eedb06, by tests/data/make_v2.py) still
load and score exactly as they did then, and save again in today's format with the same scores."""
from pathlib import Path

import numpy as np
import pytest

import baggr
from baggr.model import npzfile

DATA = Path(__file__).parent / "data"


@pytest.fixture(scope="module")
def expected():
    with np.load(DATA / "v2_expected.npz") as f:
        return {k: f[k] for k in f.files}


@pytest.mark.parametrize("name", ["v2_hard", "v2_shares", "v2_regression"])
def test_files_are_version_2(name):
    header, arrays = npzfile.read(DATA / f"{name}.npz")
    assert header["format_version"] == 2 and "tree_nodes" in arrays


@pytest.mark.parametrize("name", ["v2_hard", "v2_shares"])
@pytest.mark.parametrize("threads", [1, 2])
def test_version_2_classes_score_as_they_did(name, expected, threads, tmp_path):
    # the reference is the scores written by the code that wrote the file (bit for bit), before and
    # after a save in today's format
    ens = baggr.load(DATA / f"{name}.npz")
    rows = DATA / "v1_classes_rows.csv"
    np.testing.assert_array_equal(ens.vote_shares(rows, threads=threads), expected[name + "_shares"])
    ens.save(tmp_path / "again.npz")
    again = baggr.load(tmp_path / "again.npz")
    assert npzfile.read(tmp_path / "again.npz")[0]["format_version"] > 2
    np.testing.assert_array_equal(again.vote_shares(rows, threads=threads), expected[name + "_shares"])


def test_version_2_regression_scores_as_it_did(expected, tmp_path):
    ens = baggr.load(DATA / "v2_regression.npz")
    rows = DATA / "v1_regression_rows.csv"
    np.testing.assert_array_equal(ens.predict(rows), expected["v2_regression_predict"])
    ens.save(tmp_path / "again.npz")
    np.testing.assert_array_equal(baggr.load(tmp_path / "again.npz").predict(rows), expected["v2_regression_predict"])
