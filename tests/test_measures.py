"""The OOB measures against scipy, hand-worked tables, a published worked example and coverage on
published generators."""
import math

import numpy as np
import pytest
from scipy import stats

import baggr
import naive_measures as naive
from baggr.errors import ConfigError
from baggr.oob import measures as M
from generators import friedman1, twonorm, waveform


def _hard_votes(y, n_classes, k_mean, strength, seed):
    """OOB-like hard votes: each row gets Poisson(k_mean) votes, its own class favoured by `strength`."""
    rng = np.random.default_rng(seed)
    n = y.shape[0]
    k = rng.poisson(k_mean, n)
    p = np.full((n, n_classes), (1 - strength) / n_classes)
    p[np.arange(n), y] += strength
    p *= rng.uniform(0.5, 1.5, (n, n_classes))
    p /= p.sum(axis=1, keepdims=True)
    votes = np.stack([rng.multinomial(k[r], p[r]) for r in range(n)]).astype(np.int32)
    votes[::97] = 0     # a few rows never left out
    return votes


def _both_paths(y, votes):
    """The measures through the (k, v) cells and through the rows (sorting)."""
    a = M.class_measures(y, votes)
    old = M.MAX_CELLS
    M.MAX_CELLS = 0
    try:
        b = M.class_measures(y, votes)
    finally:
        M.MAX_CELLS = old
    return a, b


def _mwu_auc(scores, is_pos):
    # Mann-Whitney U of the positives over the negatives, divided by n1 * n0 (scipy.stats.mannwhitneyu).
    u = stats.mannwhitneyu(scores[is_pos], scores[~is_pos]).statistic
    return u / (is_pos.sum() * (~is_pos).sum())


def test_auc_equals_mann_whitney_u_over_n1_n0():
    y = np.random.default_rng(1).integers(0, 2, 3000).astype(np.int32)
    votes = _hard_votes(y, 2, 12, 0.3, seed=2)
    assert (votes.sum(axis=1) == 0).sum() > 0   # a few rows never left out: excluded
    ok, s = naive.shares_of(votes)
    ref = _mwu_auc(s[:, 1], y[ok] == 1)
    for got in _both_paths(y, votes):
        assert got["auc"][0] == pytest.approx(ref, abs=1e-12)
    # leaf-share votes (float sums) take the row path
    fv = votes.astype(np.float64) + np.random.default_rng(3).uniform(0, 0.5, votes.shape) * (votes.sum(1, keepdims=True) > 0)
    ok, s = naive.shares_of(fv)
    assert M.class_measures(y, fv)["auc"][0] == pytest.approx(_mwu_auc(s[:, 1], y[ok] == 1), abs=1e-12)
    # the run's curve ranks float shares in 65,536 bins: within a bin they count as tied
    binned = M.class_measures(y, fv, share_bins=1 << 16)["auc"][0]
    assert binned == pytest.approx(_mwu_auc(s[:, 1], y[ok] == 1), abs=1e-4)


def test_macro_auc_is_the_mean_of_one_vs_rest_mann_whitney():
    y = np.random.default_rng(4).integers(0, 3, 2000).astype(np.int32)
    votes = _hard_votes(y, 3, 10, 0.25, seed=5)
    ok, s = naive.shares_of(votes)
    ref = np.mean([_mwu_auc(s[:, c], y[ok] == c) for c in range(3)])
    a, b = _both_paths(y, votes)
    assert a["auc"][0] == pytest.approx(ref, abs=1e-12)
    for name in M.CLASS_MEASURES:
        assert a[name][0] == pytest.approx(b[name][0], rel=1e-12), name
        assert a[name][1] == pytest.approx(b[name][1], rel=1e-9), name


def test_log_loss_and_brier_worked_by_hand():
    # Four rows, two classes (hand-worked, no source): the last row was never left out.
    #   y=0 votes (3,1): k=4, smoothed p_y = 3.5/5 = 0.7,   -ln 0.7   = 0.3566749;  Brier (.75-1)^2+(.25)^2 = 0.125
    #   y=1 votes (0,2): k=2, p_y = 2.5/3,                  -ln(5/6)  = 0.1823216;  Brier 0
    #   y=1 votes (2,0): k=2, p_y = 0.5/3,                  -ln(1/6)  = 1.7917595;  Brier 1 + 1 = 2
    y = np.array([0, 1, 1, 0], np.int32)
    votes = np.array([[3, 1], [0, 2], [2, 0], [0, 0]], np.int32)
    for got in _both_paths(y, votes):
        assert got["log-loss"][0] == pytest.approx((0.3566749 + 0.1823216 + 1.7917595) / 3, abs=1e-7)
        assert got["brier"][0] == pytest.approx((0.125 + 0 + 2) / 3, abs=1e-12)
        assert got["error"][0] == pytest.approx(1 / 3)           # rows 1 and 2: only row 2 is wrong
        assert got["balanced-error"][0] == pytest.approx((0 + 0.5) / 2)
    # against the definitions on a larger table
    y = np.random.default_rng(6).integers(0, 3, 500).astype(np.int32)
    votes = _hard_votes(y, 3, 6, 0.3, seed=7)
    got = M.class_measures(y, votes)
    assert got["log-loss"][0] == pytest.approx(naive.log_loss(y, votes), rel=1e-12)
    assert got["brier"][0] == pytest.approx(naive.brier(y, votes), rel=1e-12)


# Hanley and McNeil (1982), Radiology 143, Table 1 (from memory): CT ratings 1..5 of 58 normal and
# 51 abnormal cases; their AUC is 0.893 and their standard error 0.032 (from their approximation).
HM_NORMAL = np.repeat([1, 2, 3, 4, 5], [33, 6, 6, 11, 2])
HM_ABNORMAL = np.repeat([1, 2, 3, 4, 5], [3, 2, 2, 11, 33])


def test_delong_on_the_hanley_mcneil_ratings():
    pos = np.bincount(HM_ABNORMAL, minlength=6)[1:]
    neg = np.bincount(HM_NORMAL, minlength=6)[1:]
    auc, var, _, _ = M.delong(pos, neg)
    assert round(auc, 3) == 0.893                                           # Hanley and McNeil (1982)
    # DeLong's variance from its definition (placement values by double loop) ...
    assert var == pytest.approx(naive.delong_variance(HM_ABNORMAL, HM_NORMAL), rel=1e-12)
    # ... equals the two-sample jackknife (leave one case out within each group; AUC by
    # scipy.stats.mannwhitneyu), a known identity (Hanley and Hajian-Tilaki 1997, from memory)
    def auc_of(p, q):
        return stats.mannwhitneyu(p, q).statistic / (p.size * q.size)
    m, n = HM_ABNORMAL.size, HM_NORMAL.size
    tp = np.array([auc_of(np.delete(HM_ABNORMAL, i), HM_NORMAL) for i in range(m)])
    tn = np.array([auc_of(HM_ABNORMAL, np.delete(HM_NORMAL, j)) for j in range(n)])
    jack = (m - 1) / m * np.sum((tp - tp.mean()) ** 2) + (n - 1) / n * np.sum((tn - tn.mean()) ** 2)
    assert var == pytest.approx(jack, rel=1e-9)
    # and lies near Hanley and McNeil's 0.032, which comes from a different (exponential) approximation
    assert math.sqrt(var) == pytest.approx(0.032, abs=0.002)


def test_class_table_precision_recall_f1():
    # confusion rows = true class, columns = predicted (hand-worked, no source):
    # class 0: tp 50, predicted 50+5=55, actual 50+10=60: precision 50/55, recall 50/60, F1 100/115
    cm = np.array([[50, 10], [5, 35]])
    t = M.class_table(cm)
    assert t["precision"][0][0] == pytest.approx(50 / 55)
    assert t["recall"][0][0] == pytest.approx(50 / 60)
    assert t["f1"][0][0] == pytest.approx(100 / 115)
    assert t["f1"][1][0] == pytest.approx(70 / 85)
    # Wilson interval of precision: scipy.stats.binomtest(...).proportion_ci(method="wilson")
    ref = stats.binomtest(50, 55).proportion_ci(method="wilson")
    assert t["precision"][0][1] == pytest.approx((ref.low, ref.high), abs=1e-12)
    lo, hi = t["f1"][0][1]
    assert lo < 100 / 115 < hi
    assert M.class_table(cm)["f1"][0][1] == (lo, hi)    # fixed seed: the same report every time


def test_f1_bootstrap_interval_covers_on_twonorm():
    # Breiman (1996) twonorm with its Bayes rule (sum of x > 0 is class 1): by symmetry precision
    # and recall of class 1 are both 1 - Phi(-2), so the population F1 is 1 - Phi(-2) (scipy).
    truth = 1 - stats.norm.cdf(-2)
    repeats, hits, hits_be = 300, 0, 0
    for s in range(repeats):
        X, y = twonorm(1500, seed=1000 + s)
        pred = (X.sum(axis=1) > 0).astype(int)
        cm = np.zeros((2, 2), np.int64)
        np.add.at(cm, (y, pred), 1)
        lo, hi = M.class_table(cm, rounds=1000, seed=s)["f1"][1][1]
        hits += lo <= truth <= hi
        votes = np.eye(2, dtype=np.int32)[pred]           # one vote per row: shares are the rule's class
        be_lo, be_hi = M.class_measures(y.astype(np.int32), votes)["balanced-error"][1]
        hits_be += be_lo <= stats.norm.cdf(-2) <= be_hi
    # 95% intervals: coverage within about 3 binomial s.e. (1.3% at 300 repeats) of 0.95
    assert 0.91 <= hits / repeats <= 0.99, hits / repeats
    assert 0.91 <= hits_be / repeats <= 0.99, hits_be / repeats


def test_regression_measures_and_r2_coverage_on_friedman1():
    X, y = friedman1(2000, seed=11)
    rng = np.random.default_rng(12)
    pred = y + rng.normal(0, 1.5, y.size)
    left = rng.integers(0, 4, y.size).astype(np.int32)
    vs = pred * left
    got = M.regression_measures(y, vs, left)
    ok = left > 0
    e = pred[ok] - y[ok]
    # numpy references of the definitions
    assert got["mse"][0] == pytest.approx(np.mean(e ** 2), rel=1e-12)
    assert got["rmse"][0] == pytest.approx(np.sqrt(np.mean(e ** 2)), rel=1e-12)
    assert got["mae"][0] == pytest.approx(np.mean(np.abs(e)), rel=1e-12)
    assert got["r2"][0] == pytest.approx(1 - np.mean(e ** 2) / np.var(y[ok]), rel=1e-12)
    assert got["rmse"][1] == pytest.approx(tuple(np.sqrt(got["mse"][1])), rel=1e-12)
    # R2's delta-method interval covers the population R2 of a fixed predictor (the true function of
    # Friedman 1991 plus nothing: its error is the N(0, 1) noise, so R2 = 1 - 1 / Var(y), Var(y)
    # from 2,000,000 rows) in about 95% of samples
    _, ybig = friedman1(2_000_000, seed=13)
    truth = 1 - 1 / np.var(ybig)
    hits, repeats = 0, 300
    for s in range(repeats):
        X, y = friedman1(400, seed=2000 + s)
        f = 10 * np.sin(np.pi * X[:, 0] * X[:, 1]) + 20 * (X[:, 2] - 0.5) ** 2 + 10 * X[:, 3] + 5 * X[:, 4]
        lo, hi = M.regression_measures(y, f, np.ones(y.size, np.int32))["r2"][1]
        hits += lo <= truth <= hi
    assert 0.91 <= hits / repeats <= 0.99, hits / repeats


def test_rows_never_left_out_are_excluded():
    X, y = waveform(300, seed=3)
    votes = _hard_votes(y.astype(np.int32), 3, 5, 0.4, seed=8)
    a = M.class_measures(y, votes)
    ok = votes.sum(axis=1) > 0
    b = M.class_measures(y[ok], votes[ok])
    for name in M.CLASS_MEASURES:
        assert a[name][0] == pytest.approx(b[name][0], rel=1e-12), name
    assert not ok.all()
    none = M.class_measures(y, np.zeros_like(votes))
    assert all(math.isnan(v) and iv is None for v, iv in none.values())


def test_measure_names_check_the_task():
    assert baggr.Config(measure="auc").resolved_measure("classes") == "auc"
    with pytest.raises(ConfigError, match="does not fit a regression target"):
        baggr.Config(measure="auc").resolved_measure("regression")
    with pytest.raises(ConfigError, match="must be one of"):
        baggr.Config(measure="accuracy")
    assert baggr.Config().resolved_measure("classes") == "error"
    assert baggr.Config().resolved_measure("regression") == "mse"
