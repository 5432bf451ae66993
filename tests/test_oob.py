"""One pass: the running OOB figures equal the plain definition recomputed from the kept trees."""
import numpy as np
import pytest

import baggr
from baggr import data
from baggr.oob import curve
from baggr.learn.draw import Drawer
from generators import friedman1, waveform

import naive


def _oob_by_definition(ens, X, task):
    """For every size b: each row's OOB prediction from the members m < b whose draw left it out."""
    codes = data.encode(data.read_table(X), ens.schema, ens.binning)
    n = codes.shape[1]
    cfg = ens.config
    drawer = Drawer(cfg.draw, n, cfg.seed, fraction=cfg.draw_fraction)
    trees = ens.forest.to_forest().unpack()
    n_out = ens.forest.n_out
    total = np.zeros((n, n_out))
    count = np.zeros(n, np.int64)
    per_size = []
    for m, tree in enumerate(trees):
        rows = np.flatnonzero(drawer.counts(m) == 0)
        leaves = naive.route(codes, rows, tree)  # slow, obvious traversal (tests/naive.py)
        for r, leaf in zip(rows, leaves):
            v = tree.value[leaf]
            if task == "classes" and cfg.vote == "hard":
                hot = np.zeros(n_out)
                hot[int(np.argmax(v))] = 1.0
                v = hot
            total[r] += v
            count[r] += 1
        per_size.append((total.copy(), count.copy()))
    return per_size


@pytest.mark.parametrize("vote", ["hard", "shares"])
def test_classes_oob_equals_definition_after_every_member(vote):
    X, y = waveform(250, seed=21)
    ens = baggr.train(X, y, baggr.Config(members=12, seed=4, vote=vote, min_leaf=2))
    sizes = _oob_by_definition(ens, X, "classes")
    for b, (total, count) in enumerate(sizes, start=1):
        cov = count > 0
        pred = np.argmax(total, axis=1)
        err = np.mean(pred[cov] != y[cov])
        assert ens.oob.raw_curve[b - 1] == pytest.approx(err, abs=1e-12)
        for k in range(3):
            rows = cov & (y == k)
            assert ens.oob.raw_class_curve[b - 1, k] == pytest.approx(np.mean(pred[rows] != k), abs=1e-12)
    total, count = sizes[-1]
    # the estimated curve is the one fitted to these votes (recounted from the kept trees)
    votes = total if vote == "shares" else total.astype(np.int32)
    fit = curve.fit_classes(votes, count.astype(np.int32) if vote == "shares" else np.zeros(0, np.int32),
                            np.asarray(y, np.int32), 3, 12)
    np.testing.assert_allclose(ens.oob.curve, fit.at(np.arange(1, 13)), rtol=1e-12)
    assert ens.oob.error == ens.oob.curve[-1]
    cov = count > 0
    np.testing.assert_array_equal(ens.oob.left_out, count)
    assert ens.oob.coverage == pytest.approx(cov.mean())
    labels = ens.oob.prediction
    assert all(labels[r] is None for r in np.flatnonzero(~cov))
    np.testing.assert_array_equal(labels[cov].astype(int), np.argmax(total, axis=1)[cov])
    np.testing.assert_allclose(ens.oob.shares[cov], total[cov] / total[cov].sum(axis=1, keepdims=True), rtol=1e-12)
    conf = np.zeros((3, 3), int)
    for r in np.flatnonzero(cov):
        conf[y[r], np.argmax(total[r])] += 1
    np.testing.assert_array_equal(ens.oob.confusion, conf)


def test_regression_oob_equals_definition_after_every_member():
    X, y = friedman1(300, seed=22)
    ens = baggr.train(X, y, baggr.Config(members=10, seed=5, min_leaf=3))
    sizes = _oob_by_definition(ens, X, "regression")
    for b, (total, count) in enumerate(sizes, start=1):
        cov = count > 0
        mse = np.mean((total[cov, 0] / count[cov] - y[cov]) ** 2)
        assert ens.oob.raw_curve[b - 1] == pytest.approx(mse, rel=1e-9)
    total, count = sizes[-1]
    cov = count > 0
    np.testing.assert_allclose(ens.oob.prediction[cov], total[cov, 0] / count[cov], rtol=1e-12)
    assert np.all(np.isnan(ens.oob.prediction[~cov]))
    r2 = 1 - np.mean((total[cov, 0] / count[cov] - y[cov]) ** 2) / np.var(y[cov])
    assert ens.oob.raw_r2 == pytest.approx(r2, rel=1e-9)
    # r2 reads the kept ensemble's estimated MSE (oob.error) the same way
    assert ens.oob.r2 == pytest.approx(1 - ens.oob.error / np.var(y[cov]), rel=1e-9)


def test_coverage_follows_one_minus_one_minus_q_to_the_b():
    # A row has at least one OOB vote after b members with probability 1 - (1 - q)^b,
    # q = (1 - 1/n)^n (fact of the trade; 0.899 at b = 5 for n = 1000).
    X, y = waveform(1000, seed=23)
    q = (1 - 1 / 1000) ** 1000
    cov = [baggr.train(X, y, baggr.Config(members=5, seed=s, depth_limit=2)).oob.coverage for s in range(8)]
    expected = 1 - (1 - q) ** 5
    assert np.mean(cov) == pytest.approx(expected, abs=5 * np.sqrt(expected * (1 - expected) / 8000))
