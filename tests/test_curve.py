"""The estimated curve of the kept ensemble (baggr/oob/curve.py): its parts against outside
references, and the running estimate against a recount from scratch after every member."""
import itertools
import math

import numpy as np
import pytest
from scipy import stats

from baggr.oob import curve
from baggr.oob import curve_kernels as ck
from baggr.oob.tally import MemberDelta, Tally

from naive_tally import recount_classes


def _plurality_wrong_by_enumeration(b, p, own, tie_rank):
    """Chance that b votes drawn with probabilities p (own class first) elect another class, summed
    over every vote vector (scipy's multinomial pmf); ties go to the lowest tie_rank."""
    total = 0.0
    for counts in itertools.product(range(b + 1), repeat=len(p) - 1):
        if sum(counts) > b:
            continue
        full = list(counts) + [b - sum(counts)]
        top = max(full)
        winner = min((tie_rank[i], i) for i, c in enumerate(full) if c == top)[1]
        if winner != own:
            total += stats.multinomial.pmf(full, b, p)
    return total


def test_two_class_table_is_the_binomial_tail():
    # b votes, each right with chance p: a wrong majority is Bin(b, p) < b / 2 (scipy.stats.binom);
    # a tie (even b) goes to class 0, so it is wrong for rows of class 1 only
    s = curve.sizes(curve.MAX_SIZE)
    p = curve._grid_two()[0][:, 0]
    for tie_wrong in (False, True):
        g = curve._g_two(s, tie_wrong)
        for b in (1, 2, 5, 8, 67):
            i = int(np.flatnonzero(s == b)[0])
            want = stats.binom.cdf(math.ceil(b / 2) - 1, b, p)
            if b % 2 == 0 and tie_wrong:
                want = want + stats.binom.pmf(b // 2, b, p)
            np.testing.assert_allclose(g[:, i], want, atol=1e-12)
        # b -> oo: wrong exactly when p < 1/2 (law of large numbers)
        assert np.all(g[p < 0.5, -1] == 1.0) and np.all(g[p > 0.5, -1] == 0.0)


def test_three_class_table_against_enumeration():
    # against every vote vector's multinomial probability (scipy), for each place of the own class
    s = curve.sizes(curve.MAX_SIZE_THREE)
    grid = curve._grid_three()[0]
    rng = np.random.default_rng(0)
    picks = rng.choice(grid.shape[0], 8, replace=False)
    for own_rank, (t1, t2) in enumerate([(True, True), (False, True), (False, False)]):
        # own class 0, 1 or 2: the others keep their order around it
        ranks = {0: [0, 1, 2], 1: [1, 0, 2], 2: [2, 0, 1]}[own_rank]
        g = curve._g_three(s, t1, t2)
        for b in (1, 2, 3, 4, 7):
            i = int(np.flatnonzero(s == b)[0])
            for j in picks:
                want = _plurality_wrong_by_enumeration(b, grid[j], 0, ranks)
                assert g[j, i] == pytest.approx(want, abs=1e-10), (own_rank, b, grid[j])


def _binomial_rows(rng, n, members, draw_p):
    """Rows whose votes are Binomial(k_i, p_i) with k_i ~ Bin(members, e^-1): the model the
    estimate rests on, with a known truth."""
    p = draw_p(rng, n)
    k = rng.binomial(members, math.exp(-1), n)
    v = rng.binomial(k, p)
    return p, k, v


def test_estimate_recovers_the_error_of_b_votes_when_votes_follow_the_model():
    # With p_i known, the error of b votes on row i is the binomial tail g_b(p_i) (scipy): the
    # estimate from k_i ~ 0.37 M votes per row, averaged over seeds, matches mean g_b(p_i) at b = M,
    # where the plain majority of the k_i votes (the textbook OOB error) reads far higher.
    def draw_p(rng, n):  # most rows easy, some hard, a few wrongly labelled: a forest's shape
        u = rng.random(n)
        return np.where(u < 0.7, rng.beta(20, 1.5, n), np.where(u < 0.92, rng.beta(3, 2, n), rng.beta(1.5, 6, n)))

    for members in (10, 40):
        diffs, raws = [], []
        for seed in range(30):
            rng = np.random.default_rng(seed)
            p, k, v = _binomial_rows(rng, 1500, members, draw_p)
            y = np.zeros(p.shape[0], np.int32)
            votes = np.stack([v, k - v], axis=1).astype(np.int32)
            fit = curve.fit_classes(votes, np.zeros(0, np.int32), y, 2, members)
            truth = np.mean(stats.binom.cdf(math.ceil(members / 2) - 1, members, p))
            diffs.append(fit.at(members)[0] - truth)
            cov = k > 0
            raws.append(np.mean(2 * v[cov] <= k[cov]) - truth)
        d = np.array(diffs)
        se = d.std(ddof=1) / np.sqrt(d.size)
        assert abs(d.mean()) < 3 * se + 0.002, (members, d.mean(), se)
        r = np.array(raws)
        assert r.mean() > 0.01 and r.mean() > 10 * r.std(ddof=1) / np.sqrt(r.size), (members, r.mean())


def test_influence_is_the_derivative_of_the_fit():
    # the influence of a cell is d(estimate)/d(weight of the cell): checked by refitting with a
    # slightly larger weight on each of a few cells (central finite differences)
    rng = np.random.default_rng(3)
    p, k, v = _binomial_rows(rng, 400, 20, lambda r, n: r.beta(4, 1.5, n))
    keep = k > 0
    cells, counts = ck.class_cells(np.stack([v[keep], k[keep] - v[keep]], 1).astype(np.int32),
                                   np.zeros(0, np.int32), np.zeros(keep.sum(), np.int32), 0, 1, False, 1)
    grid, (sp, si, sv) = curve._grid_two()
    g = curve._g_two(curve.sizes(curve.MAX_SIZE), False)[:, [0, 9, -1]].copy()
    lp, li, lv = ck.likelihood(cells, grid, curve.DROP)
    w = counts.astype(np.float64)

    def t(weights):
        pi, _ = ck.ems(lp, li, lv, weights, sp, si, sv, grid.shape[0], 1e-14, 200000)
        return pi @ g

    pi, _ = ck.ems(lp, li, lv, w, sp, si, sv, grid.shape[0], 1e-14, 200000)
    psi = ck.influence(lp, li, lv, w, sp, si, sv, pi, g)
    total = w.sum()
    for c in rng.choice(cells.shape[0], 5, replace=False):
        h = 1e-4 * total
        up, down = w.copy(), w.copy()
        up[c] += h
        down[c] -= h
        # d t / d w_c with the weights renormalised: the influence of cell c, centred
        deriv = (t(up) - t(down)) / (2 * h) * total
        np.testing.assert_allclose(psi[c], deriv, rtol=2e-3, atol=2e-6)


def test_regression_estimate_is_bias_plus_spread_over_b():
    # E[(y - mean of b predictions)^2] = (y - mu)^2 + sigma^2 / b (bias-variance, textbook); the
    # per-row estimate from k predictions is unbiased for it: checked over many simulated tallies
    rng = np.random.default_rng(4)
    n, b = 300, 50
    mu = rng.normal(size=n)
    sigma = rng.uniform(0.5, 2.0, n)
    y = mu + rng.normal(scale=0.5, size=n)
    truth = np.mean((y - mu) ** 2 + sigma ** 2 / b)
    ests = []
    for rep in range(200):
        k = rng.binomial(8, math.exp(-1), n).astype(np.int32)
        x = rng.normal(mu[:, None], sigma[:, None], (n, 8))
        mask = np.arange(8)[None, :] < k[:, None]
        s = np.where(mask, x, 0.0).sum(axis=1)
        mean = s / np.maximum(k, 1)
        m2 = np.where(mask, (x - mean[:, None]) ** 2, 0.0).sum(axis=1)
        ests.append(curve.fit_regression(s, m2, k, y, 8).at(b)[0])
    e = np.array(ests)
    assert abs(e.mean() - truth) < 3 * e.std(ddof=1) / np.sqrt(e.size), (e.mean(), truth)


def _deltas(rng, n, c, members, soft):
    out = []
    for m in range(members):
        rows = np.flatnonzero(rng.random(n) < 0.37).astype(np.int32)
        if soft:
            v = rng.dirichlet(np.ones(c) * 0.3, size=rows.size)
        else:
            v = rng.integers(0, c, rows.size).astype(np.int32)
        out.append(MemberDelta(m, rows, v))
    return out


def _assert_fit_equal(a, b):
    for name, x in a.arrays().items():
        np.testing.assert_array_equal(x, b.arrays()[name], err_msg=name)


@pytest.mark.parametrize("n_classes,soft", [(2, False), (3, False), (4, False), (2, True)])
def test_classes_estimate_incremental_equals_batch(n_classes, soft):
    # after every member, the running estimate is the one a recount of the votes from scratch gives
    rng = np.random.default_rng(10 + n_classes)
    n, members = (250, 17) if n_classes == 2 else (120, 12)
    y = rng.integers(0, n_classes, n).astype(np.int32)
    deltas = _deltas(rng, n, n_classes, members, soft)
    t = Tally("classes", y, n_classes, "shares" if soft else "hard", capacity=members)
    last = None
    for m, d in enumerate(deltas):
        t.fold(d)
        hot = [MemberDelta(x.member, x.rows, x.votes if soft else np.eye(n_classes, dtype=np.int32)[x.votes])
               for x in deltas[: m + 1]]
        ref = recount_classes(y, n_classes, hot)
        votes = ref["votes"] if soft else ref["votes"].astype(np.int32)
        left = ref["left_out"].astype(np.int32) if soft else np.zeros(0, np.int32)
        if curve.refit_due(m + 1):
            last = curve.fit_classes(votes, left, y, n_classes, m + 1, sample=curve.LIVE_ROWS)
        if last is None:                    # no refit yet: the figures are the textbook ones
            assert t.est is None and t.live() == {}
            continue
        _assert_fit_equal(t.est, last)
        _assert_fit_equal(t.fit(), curve.fit_classes(votes, left, y, n_classes, m + 1))
        live = t.live()
        assert live["error"] == last.at(m + 1)[0]
        assert live["class_error"] == last.class_at(m + 1)[0].tolist()


def test_regression_estimate_incremental_equals_batch():
    rng = np.random.default_rng(20)
    n, members = 200, 15
    y = rng.normal(size=n)
    t = Tally("regression", y, 1, "hard", capacity=members)
    seen = [[] for _ in range(n)]
    for m in range(members):
        rows = np.flatnonzero(rng.random(n) < 0.37).astype(np.int32)
        vals = rng.normal(size=rows.size)
        t.fold(MemberDelta(m, rows, vals))
        for r, x in zip(rows, vals):
            seen[r].append(x)
        k = np.array([len(s) for s in seen], np.int32)
        s = np.array([sum(v) for v in seen])
        m2 = np.array([np.sum((np.array(v) - np.mean(v)) ** 2) if v else 0.0 for v in seen])  # two-pass
        np.testing.assert_allclose(t.value_m2, m2, rtol=1e-12, atol=1e-12)
        ref = curve.fit_regression(s, m2, k, y, m + 1)
        got = t.fit()
        np.testing.assert_allclose(got.error, ref.error, rtol=1e-11)
        np.testing.assert_allclose(got.var, ref.var, rtol=1e-9)


def test_estimate_survives_a_checkpoint_bit_for_bit():
    # a tally restored from its arrays mid-run folds on to the same estimate as one never stopped
    rng = np.random.default_rng(30)
    n, members = 300, 40
    y = rng.integers(0, 2, n).astype(np.int32)
    deltas = _deltas(rng, n, 2, members, False)
    whole = Tally("classes", y, 2, "hard", capacity=members)
    for d in deltas:
        whole.fold(d)
    part = Tally("classes", y, 2, "hard", capacity=members)
    for d in deltas[:13]:           # 13: between two refits, so the restored fit is read until 16
        part.fold(d)
    again = Tally("classes", y, 2, "hard", capacity=members)
    again.restore({k: np.array(v, copy=True) for k, v in part.arrays().items()})
    for d in deltas[13:]:
        again.fold(d)
    for name, a in whole.arrays().items():
        np.testing.assert_array_equal(again.arrays()[name], a, err_msg=name)


def test_members_needed_and_limit_follow_the_curve():
    rng = np.random.default_rng(5)
    p, k, v = _binomial_rows(rng, 3000, 60, lambda r, n: np.where(r.random(n) < 0.8, r.beta(9, 1, n), r.beta(2, 2, n)))
    fit = curve.fit_classes(np.stack([v, k - v], 1).astype(np.int32), np.zeros(0, np.int32),
                            np.zeros(3000, np.int32), 2, 60)
    need = fit.members_needed()
    tol = fit.tolerance()
    assert tol == max(0.01 * fit.limit, 0.001)
    # definition: from `need` on the estimate stays within tol of the limit, and not from need - 1
    b = np.arange(need, need + 5000)
    assert np.all(fit.at(b) <= fit.limit + tol)
    assert not np.all(fit.at(np.arange(need - 1, need + 5000)) <= fit.limit + tol)
    # the limit lies below every finite size's estimate here (no row at exactly 1/2 dominates)
    assert fit.limit < fit.at(1001)[0] < fit.at(11)[0]
