"""Model files of format version 1 (made by baggr at commit 909f52b, by tests/data/make_v1.py) still
load and score exactly as they did then."""
from pathlib import Path

import numpy as np
import pytest

import baggr
from baggr.model import npzfile

DATA = Path(__file__).parent / "data"


@pytest.fixture(scope="module")
def expected():
    with np.load(DATA / "v1_expected.npz") as f:
        return {k: f[k] for k in f.files}


@pytest.mark.parametrize("name", ["v1_hard", "v1_shares", "v1_regression"])
def test_files_are_version_1(name):
    header, arrays = npzfile.read(DATA / f"{name}.npz")
    assert header["format_version"] == 1 and "tree_left" in arrays


@pytest.mark.parametrize("name", ["v1_hard", "v1_shares"])
def test_version_1_classes_score_as_they_did(name, expected):
    # the reference is the scores written by the code that wrote the file (bit for bit)
    ens = baggr.load(DATA / f"{name}.npz")
    np.testing.assert_array_equal(ens.vote_shares(DATA / "v1_classes_rows.csv"), expected[name + "_shares"])


def test_version_1_regression_scores_as_it_did(expected):
    ens = baggr.load(DATA / "v1_regression.npz")
    np.testing.assert_array_equal(ens.predict(DATA / "v1_regression_rows.csv"), expected["v1_regression_predict"])


@pytest.mark.parametrize("threads", [1, 2])
def test_version_1_files_saved_again_score_the_same(expected, tmp_path, threads):
    ens = baggr.load(DATA / "v1_hard.npz")
    ens.save(tmp_path / "again.npz")
    again = baggr.load(tmp_path / "again.npz")
    assert npzfile.read(tmp_path / "again.npz")[0]["format_version"] > 1
    np.testing.assert_array_equal(again.vote_shares(DATA / "v1_classes_rows.csv", threads=threads),
                                  expected["v1_hard_shares"])
    ens = baggr.load(DATA / "v1_regression.npz")
    ens.save(tmp_path / "again_r.npz")
    np.testing.assert_array_equal(baggr.load(tmp_path / "again_r.npz").predict(DATA / "v1_regression_rows.csv",
                                                                                threads=threads),
                                  expected["v1_regression_predict"])
