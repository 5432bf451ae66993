"""Paired comparisons (baggr.oob.paired) checked against scipy, textbook examples and brute force."""
import math

import numpy as np
import pytest
from scipy import stats

from baggr.oob import paired


@pytest.mark.parametrize("b,c", [(0, 0), (0, 1), (3, 3), (1, 9), (9, 1), (12, 30), (150, 86), (0, 25),
                                 (480, 520), (1200, 1330), (20_000, 20_500), (3, 4000)])
def test_mcnemar_p_equals_scipy_binomtest_on_the_discordant_rows(b, c):
    want = stats.binomtest(b, b + c, 0.5).pvalue if b + c else 1.0   # scipy.stats.binomtest, two-sided
    assert paired.mcnemar_p(b, c) == pytest.approx(want, rel=1e-9, abs=1e-300)


def test_binomial_half_cdf_equals_scipy_on_both_paths():
    for n, k in [(10, 3), (1999, 950), (2001, 950), (50_000, 24_700), (400_000, 199_000)]:
        assert paired.binomial_half_cdf(k, n) == pytest.approx(stats.binom.cdf(k, n, 0.5), rel=1e-8)  # scipy


def test_error_difference_p_is_binomtest_of_random_discordant_rows():
    rng = np.random.default_rng(3)
    for _ in range(20):
        n = int(rng.integers(50, 3000))
        wa = rng.random(n) < 0.2
        wb = np.where(rng.random(n) < 0.8, wa, rng.random(n) < 0.3)
        r = paired.error_difference(wa, wb)
        b, c = int(np.sum(wa & ~wb)), int(np.sum(wb & ~wa))
        want = stats.binomtest(b, b + c, 0.5).pvalue if b + c else 1.0   # scipy.stats.binomtest
        assert r.p_value == pytest.approx(want, rel=1e-9)
        assert r.difference == pytest.approx(wa.mean() - wb.mean(), abs=1e-15)
        assert r.interval[0] < r.difference + 0.01 and r.difference - 0.01 < r.interval[1]


def test_error_difference_on_agrestis_approval_ratings():
    """Agresti, Categorical Data Analysis (2002), sec. 10.1.1 (from memory): 1600 people asked twice,
    794 approve both times, 150 approve then not, 86 not then approve, 570 neither; the difference
    of the approval shares is 0.04 with a Wald standard error of 0.0095 and McNemar's z = 4.17."""
    first = np.repeat([1, 1, 0, 0], [794, 150, 86, 570]).astype(bool)
    second = np.repeat([1, 0, 1, 0], [794, 150, 86, 570]).astype(bool)
    r = paired.error_difference(first, second)
    assert r.difference == pytest.approx(0.04)
    assert r.se == pytest.approx(0.0095, abs=0.0002)      # Agresti-Min adds 1/2 a cell: 0.00956
    assert r.interval[0] == pytest.approx(0.02, abs=0.002) and r.interval[1] == pytest.approx(0.06, abs=0.002)
    assert (150 - 86) / math.sqrt(150 + 86) == pytest.approx(4.17, abs=0.01)
    assert r.p_value < 1e-4                                 # exact test agrees with z = 4.17 (p = 3e-5)


def test_mean_difference_is_the_normal_interval_on_per_row_differences():
    rng = np.random.default_rng(5)
    a = rng.gamma(2.0, 0.3, 800)
    b = a + rng.normal(0.02, 0.1, 800)
    r = paired.mean_difference(a, b)
    d = a - b
    se = stats.sem(d)                                    # scipy.stats.sem (ddof=1)
    assert r.se == pytest.approx(se, rel=1e-12)
    assert r.interval == pytest.approx((d.mean() - 1.959964 * se, d.mean() + 1.959964 * se), rel=1e-6)
    assert r.p_value == pytest.approx(2 * stats.norm.sf(abs(d.mean() / se)), rel=1e-9)   # scipy.stats.norm


def test_stratified_mean_difference_equals_the_sum_of_per_stratum_variances():
    rng = np.random.default_rng(8)
    y = np.repeat([0, 1, 2], [500, 120, 40])
    d = rng.random(y.shape[0]) < np.array([0.1, 0.3, 0.5])[y]
    w = (1.0 / (3 * np.bincount(y)))[y]
    r = paired.mean_difference(d.astype(float), np.zeros(y.shape[0]), weights=w)
    # balanced error = mean of per-class error rates; variance of a mean of independent class means
    # (textbook: stratified sampling, Cochran 1977, eq. 5.6)
    rates = [d[y == k].mean() for k in range(3)]
    var = sum(d[y == k].var(ddof=1) / (y == k).sum() for k in range(3)) / 9
    assert r.difference == pytest.approx(np.mean(rates), rel=1e-12)
    assert r.se == pytest.approx(math.sqrt(var), rel=1e-12)


def _auc(scores, pos):
    """AUC by its definition over all (positive, negative) pairs, ties counting 1/2 (Hanley & McNeil 1982)."""
    x, y = scores[pos][:, None], scores[~pos][None, :]
    return float(np.mean((x > y) + 0.5 * (x == y)))


def test_pairwise_auc_is_scipy_mann_whitney_u():
    rng = np.random.default_rng(4)
    s, pos = np.round(rng.normal(size=200), 1), rng.random(200) < 0.3
    u = stats.mannwhitneyu(s[pos], s[~pos]).statistic               # scipy.stats.mannwhitneyu
    assert _auc(s, pos) == pytest.approx(u / (pos.sum() * (~pos).sum()), rel=1e-12)
    assert paired.placements(s, pos)[2] == pytest.approx(u / (pos.sum() * (~pos).sum()), rel=1e-12)


def test_delong_auc_is_mann_whitney_and_its_variance_the_two_sample_jackknife():
    """DeLong et al. (1988): the AUC is the Mann-Whitney statistic; its variance estimate equals the
    two-sample jackknife (Arvesen 1969: leave out one positive, then one negative), checked here by
    recomputing the AUC difference with each row left out, by brute force."""
    rng = np.random.default_rng(11)
    n = 160
    pos = rng.random(n) < 0.4
    truth = pos * 1.0 + rng.normal(0, 1, n)
    sa = np.round(truth + rng.normal(0, 0.5, n), 1)       # rounded: ties, as vote shares have
    sb = np.round(truth + rng.normal(0, 0.9, n), 1)
    r = paired.auc_difference(sa, sb, pos)
    assert r.difference == pytest.approx(_auc(sa, pos) - _auc(sb, pos), abs=1e-12)
    total = 0.0
    for group in (pos, ~pos):
        idx = np.flatnonzero(group)
        k = idx.shape[0]
        th = np.array([_auc(np.delete(sa, i), np.delete(pos, i)) - _auc(np.delete(sb, i), np.delete(pos, i))
                       for i in idx])
        total += (k - 1) / k * np.sum((th - th.mean()) ** 2)
    assert r.se ** 2 == pytest.approx(total, rel=1e-9)
    assert r.p_value == pytest.approx(2 * stats.norm.sf(abs(r.difference) / r.se), rel=1e-9)


def test_macro_auc_difference_variance_agrees_with_the_jackknife():
    """Three classes: the macro one-vs-rest AUC difference's variance against the ordinary
    delete-one jackknife over rows (Quenouille-Tukey; textbook, e.g. Efron & Tibshirani 1993 ch. 11),
    by brute force; the two are first-order equal, so within 10%."""
    rng = np.random.default_rng(2)
    n, C = 150, 3
    y = rng.integers(0, C, n)
    def shares(noise):
        s = np.eye(C)[y] * 1.5 + rng.normal(0, noise, (n, C))
        s = np.exp(s)
        return s / s.sum(axis=1, keepdims=True)
    sa, sb = shares(1.0), shares(1.4)

    def macro(s, yy):
        return np.mean([_auc(s[:, k], yy == k) for k in range(C)])
    r = paired.macro_auc_difference(sa, sb, y, C)
    assert r.difference == pytest.approx(macro(sa, y) - macro(sb, y), abs=1e-12)
    th = np.array([macro(np.delete(sa, i, 0), np.delete(y, i)) - macro(np.delete(sb, i, 0), np.delete(y, i))
                   for i in range(n)])
    jack = (n - 1) / n * np.sum((th - th.mean()) ** 2)
    assert r.se ** 2 == pytest.approx(jack, rel=0.10)


def test_holm_on_the_worked_example():
    """The worked example of the Holm-Bonferroni method (Wikipedia, "Holm-Bonferroni method", from
    memory): p = 0.01, 0.04, 0.03, 0.005 at alpha 0.05 rejects H1 and H4 only; the adjusted values
    are 4 x 0.005 = 0.02, 3 x 0.01 = 0.03, max(0.03, 2 x 0.03) = 0.06, max(0.06, 0.04) = 0.06."""
    adj = paired.holm([0.01, 0.04, 0.03, 0.005])
    assert adj == pytest.approx([0.03, 0.06, 0.06, 0.02])
    assert [a <= 0.05 for a in adj] == [True, False, False, True]
    assert paired.holm([0.5, float("nan"), 0.9])[0] == pytest.approx(1.0)   # two counted, capped at 1
    assert math.isnan(paired.holm([0.5, float("nan"), 0.9])[1])
