"""Draw counts: the out-of-bag share, the count distribution and coverage against their exact values."""
import numpy as np
import pytest
from scipy import stats

from baggr.learn.draw import Drawer


@pytest.mark.parametrize("n, share", [(10, 0.348678), (100, 0.366032), (1000, 0.367695)])
def test_oob_share_matches_one_minus_one_over_n_to_the_n(n, share):
    # Fact of the trade (exact): one bootstrap draw leaves out a row with probability (1 - 1/n)^n.
    assert (1 - 1 / n) ** n == pytest.approx(share, abs=5e-7)
    members = 200_000 // n
    d = Drawer("bootstrap", n, seed=11)
    oob = np.mean([np.count_nonzero(d.counts(m) == 0) for m in range(members)]) / n
    # Each member's OOB count has variance n q (1-q) at most (rows are negatively correlated): 5 sigma.
    sigma = np.sqrt(share * (1 - share) / (n * members))
    assert abs(oob - share) < 5 * sigma
    assert (1 - 1 / n) ** n < 1 / np.e  # tends to 1/e from below


def test_draw_count_is_binomial_n_one_over_n():
    # Fact of the trade: a row's count is Binomial(n, 1/n); reference pmf from scipy.stats.binom.
    n, members = 50, 4000
    d = Drawer("bootstrap", n, seed=3)
    counts = np.concatenate([d.counts(m) for m in range(members)])
    k = np.arange(0, 5)
    observed = np.array([np.count_nonzero(counts == v) for v in k] + [np.count_nonzero(counts >= 5)])
    pmf = stats.binom.pmf(k, n, 1 / n)
    expected = np.concatenate([pmf, [1 - pmf.sum()]]) * counts.size
    assert observed.sum() == counts.size
    # Chi-square goodness of fit (scipy.stats.chisquare); fixed seed, so this is not flaky.
    assert stats.chisquare(observed, expected).pvalue > 1e-3
    assert counts.sum() == n * members  # every member draws exactly n rows


@pytest.mark.parametrize("b, p", [(5, 0.899), (10, 0.9898)])
def test_coverage_after_b_members(b, p):
    # After b members a row was left out at least once with probability 1 - (1 - q)^b, q = (1-1/n)^n.
    n = 1000
    q = (1 - 1 / n) ** n
    assert 1 - (1 - q) ** b == pytest.approx(p, abs=6e-4)
    shares = []
    for seed in range(20):
        d = Drawer("bootstrap", n, seed=seed)
        left_out = np.zeros(n, bool)
        for m in range(b):
            left_out |= d.counts(m) == 0
        shares.append(left_out.mean())
    sigma = np.sqrt(p * (1 - p) / (n * 20))
    assert abs(np.mean(shares) - (1 - (1 - q) ** b)) < 5 * sigma


def test_member_depends_only_on_seed_and_index():
    # DESIGN.md invariant: member m's draw comes from (seed, m) alone, whatever was drawn before.
    a = Drawer("bootstrap", 500, seed=5)
    b = Drawer("bootstrap", 500, seed=5)
    first = [a.counts(m) for m in range(6)]
    backwards = [b.counts(m) for m in reversed(range(6))][::-1]
    for x, y in zip(first, backwards):
        assert np.array_equal(x, y)
    assert not np.array_equal(first[0], first[1])
    assert not np.array_equal(Drawer("bootstrap", 500, seed=6).counts(0), first[0])


def test_balanced_draws_the_smallest_class_size_from_every_class():
    # Chen, Liaw & Breiman (2004), balanced random forests: each class contributes as many draws
    # as the smallest class has rows.
    y = np.array([0] * 700 + [1] * 250 + [2] * 50)
    d = Drawer("balanced", y.size, seed=1, y_class=y)
    for m in range(5):
        c = d.counts(m)
        assert [c[y == k].sum() for k in range(3)] == [50, 50, 50]
    # Rows of the big class are mostly left out of every member.
    c = np.stack([d.counts(m) for m in range(200)])
    big_oob = np.mean(c[:, y == 0] == 0)
    # P(row of class 0 not drawn) = (1 - 1/700)^50 (exact, same argument as the bootstrap).
    assert big_oob == pytest.approx((1 - 1 / 700) ** 50, abs=0.01)


def test_subsample_draws_distinct_rows_with_equal_chance():
    # Selection sampling (Knuth, TAOCP vol. 2, Algorithm S): exactly k rows, each with probability k/n.
    n, frac, members = 200, 0.3, 3000
    d = Drawer("subsample", n, seed=2, fraction=frac)
    c = np.stack([d.counts(m) for m in range(members)])
    assert set(np.unique(c)) <= {0, 1}
    assert np.all(c.sum(axis=1) == 60)
    inclusion = c.mean(axis=0)
    # Each row's inclusion count is Binomial(members, 0.3): 5 sigma around 0.3 for every row.
    sigma = np.sqrt(0.3 * 0.7 / members)
    assert np.all(np.abs(inclusion - 0.3) < 5 * sigma)
