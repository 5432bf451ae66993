"""Intervals of the OOB error against scipy's implementations."""
import numpy as np
import pytest
from scipy import stats

from baggr.oob.intervals import normal_mean, wilson


@pytest.mark.parametrize("k, n", [(10, 100), (0, 37), (37, 37), (123, 4567), (1, 2)])
def test_wilson_matches_scipy(k, n):
    # Wilson (1927) score interval; reference: scipy.stats.binomtest(...).proportion_ci(method="wilson").
    ref = stats.binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    lo, hi = wilson(k, n)
    assert lo == pytest.approx(ref.low, abs=1e-12)
    assert hi == pytest.approx(ref.high, abs=1e-12)


def test_wilson_textbook_value():
    # 10 errors in 100 rows: [0.0552, 0.1744] (Wilson 1927 formula, evaluated by hand to 4 places).
    lo, hi = wilson(10, 100)
    assert (round(lo, 4), round(hi, 4)) == (0.0552, 0.1744)
    assert wilson(0, 0) is None


def test_normal_interval_matches_scipy_t_free_formula():
    # Normal interval mean +/- z s / sqrt(n), z from scipy.stats.norm.ppf(0.975), s the sample sd.
    x = np.random.default_rng(0).exponential(size=500)
    lo, hi = normal_mean(x.sum(), (x ** 2).sum(), x.size)
    half = stats.norm.ppf(0.975) * x.std(ddof=1) / np.sqrt(x.size)
    assert lo == pytest.approx(x.mean() - half, rel=1e-9)
    assert hi == pytest.approx(x.mean() + half, rel=1e-9)
