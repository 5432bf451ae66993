"""The measures' estimate for the kept ensemble (baggr/oob/measure_fit.py): its closed forms against
brute force, the live refits against a recount, and the stop rule on the chosen measure."""
import itertools

import numpy as np
import pytest
from scipy import stats

import baggr
from baggr.engine import Training
from baggr.oob import curve as cv
from baggr.oob import measure_fit as mf
from baggr.oob import measure_fit_kernels as mk
from baggr.runs.job import stable_now
from baggr.runs.rundir import RunSettings
from generators import friedman1, twonorm


def test_brier_closed_form_equals_the_binomial_sum():
    # E[sum_c (s_c - y_c)^2] over s = Binomial(b, p) / b, enumerated with scipy.stats.binom (two
    # classes: the row's own class and the other; three: own, other 1, other 2 from the multinomial)
    sizes = np.array([1, 2, 5, 17], np.int64)
    grid2 = np.array([[0.0, 1.0], [0.3, 0.7], [0.55, 0.45], [1.0, 0.0]])
    t = mf.brier_table(grid2, sizes)
    for i, (p, _) in enumerate(grid2):
        for j, b in enumerate(sizes):
            x = np.arange(b + 1)
            want = np.sum(stats.binom.pmf(x, b, p) * ((x / b - 1) ** 2 + ((b - x) / b) ** 2))
            assert t[i, j] == pytest.approx(want, abs=1e-12)
        assert t[i, -1] == pytest.approx(2 * (1 - p) ** 2, abs=1e-15)   # b -> oo: the share is p
    grid3 = np.array([[0.5, 0.3, 0.2], [0.1, 0.1, 0.8]])
    t3 = mf.brier_table(grid3, np.array([3, 4], np.int64))
    for i, p in enumerate(grid3):
        for j, b in enumerate((3, 4)):
            want = 0.0
            for x0, x1 in itertools.product(range(b + 1), repeat=2):
                if x0 + x1 <= b:
                    s = np.array([x0, x1, b - x0 - x1]) / b
                    want += stats.multinomial.pmf([x0, x1, b - x0 - x1], b, p) * np.sum((s - [1, 0, 0]) ** 2)
            assert t3[i, j] == pytest.approx(want, abs=1e-12)


@pytest.mark.parametrize("p", [0.0, 1e-4, 0.03, 0.3, 0.5, 0.97, 1.0])
def test_log_loss_expectation_equals_the_binomial_sum(p):
    # E[-log((X + 1/2) / (b + C/2))], X ~ Binomial(b, p), summed over every x with scipy.stats.binom;
    # b up to 20,000 reaches the kernel's moment expansion (standard deviation above 20)
    sizes = np.array([1, 2, 7, 64, 1001, 20_000], np.int64)
    got = mk.log_loss_table(np.array([p]), sizes, 1.0)[0]
    for j, b in enumerate(sizes):
        x = np.arange(b + 1)
        want = np.sum(stats.binom.pmf(x, b, p) * -np.log((x + 0.5) / (b + 1.0)))
        assert got[j] == pytest.approx(want, rel=1e-9, abs=1e-12), (b, got[j], want)


def test_auc_of_two_mixtures_equals_enumeration_and_its_gradients_are_the_derivatives():
    # AUC_b = P(X_pos > X_neg) + P(=) / 2 for X ~ Binomial(b, r) with r drawn from pi1 (positives) and
    # pi0 (negatives), enumerated over (j, l, x, x') with scipy.stats.binom; the gradients by finite
    # differences (the AUC is bilinear in the two priors, so they are exact)
    rng = np.random.default_rng(3)
    r = np.linspace(0, 1, 6)
    pi1, pi0 = rng.dirichlet(np.ones(6)), rng.dirichlet(np.ones(6))
    sizes = np.array([1, 2, 5, 8], np.int64)
    auc, g1, g0 = mk.auc_tables(r, pi1, pi0, sizes)
    for s, b in enumerate(sizes):
        x = np.arange(b + 1)
        f1 = sum(pi1[j] * stats.binom.pmf(x, b, r[j]) for j in range(6))
        f0 = sum(pi0[j] * stats.binom.pmf(x, b, r[j]) for j in range(6))
        want = sum(f1[a] * f0[c] * (1.0 if a > c else 0.5 if a == c else 0.0) for a in x for c in x)
        assert auc[s] == pytest.approx(want, abs=1e-12)
        assert float(pi1 @ g1[:, s]) == pytest.approx(want, abs=1e-12)
        assert float(pi0 @ g0[:, s]) == pytest.approx(want, abs=1e-12)
        e = np.eye(6)[2] * 1e-6
        up = mk.auc_tables(r, pi1 + e, pi0, sizes)[0][s]
        assert (up - auc[s]) / 1e-6 == pytest.approx(g1[2, s], abs=1e-7)


def test_fitted_measures_agree_with_their_definitions_on_a_run():
    X, y = twonorm(300, seed=11)
    ens = baggr.train(X, y, baggr.Config(members=40, seed=12, threads=1))
    fits = ens.oob.measure_fits()
    assert set(fits) == {"error", "balanced-error", "brier", "log-loss", "auc"}
    # balanced error: the mean of the two classes' estimated errors (its definition, README)
    b = np.arange(1, 41)
    np.testing.assert_allclose(fits["balanced-error"].at(b), ens.oob.class_curve.mean(axis=1), rtol=1e-12)
    # the error's fit is the view's own (oob.error), and every figure lies in its measure's range
    assert fits["error"].point(40)[0] == ens.oob.error
    for name, lo, hi in (("brier", 0, 2), ("log-loss", 0, np.inf), ("auc", 0, 1)):
        e = fits[name].at(b)
        assert np.all((e >= lo) & (e <= hi)), name
    # the estimate moves the textbook figure the way more members do (Lopes 2019: towards the limit)
    raw, got = ens.oob.raw_measures(), ens.oob.measures()
    assert got["brier"][0] < raw["brier"][0] and got["log-loss"][0] < raw["log-loss"][0]
    assert got["auc"][0] > raw["auc"][0]
    # members_needed of a measure where higher is better: within 1% of (1 - limit) from there on
    f = fits["auc"]
    need = f.members_needed()
    tol = max(0.01 * (1 - f.limit), 0.001)
    assert f.tolerance() == pytest.approx(tol)
    assert f.at(np.array([need]))[0] >= f.limit - tol and f.at(np.array([need - 1]))[0] < f.limit - tol


def test_regression_measures_follow_the_mse_estimate():
    X, y = friedman1(300, seed=13)
    ens = baggr.train(X, y, baggr.Config(members=30, seed=14, threads=1))
    fits = ens.oob.measure_fits()
    mse = fits["mse"]
    b = np.arange(1, 31)
    # rmse = sqrt(mse); r2 = 1 - mse / Var(y) over the covered rows (definitions in the README)
    np.testing.assert_allclose(fits["rmse"].at(b), np.sqrt(mse.at(b)), rtol=1e-12)
    yy = y[ens.oob.left_out > 0]
    np.testing.assert_allclose(fits["r2"].at(b), 1 - mse.at(b) / np.var(yy), rtol=1e-10)
    # MAE: the folded normal mean at b -> oo is the mean |delta|, and the figure falls with b
    assert np.all(np.diff(fits["mae"].at(b)) <= 1e-12)
    assert fits["mae"].limit <= fits["mae"].at(np.array([30]))[0]


@pytest.mark.parametrize("measure", ["brier", "auc"])
def test_live_refit_of_the_measure_equals_a_recount(measure):
    # incremental equals batch: the run's refit after 64 members (on about LIVE_ROWS sampled rows)
    # equals the same fit of the tallies of a 64-member run, made from scratch
    X, y = twonorm(3000, seed=15)
    cfg = baggr.Config(members=64, seed=16, threads=2, measure=measure)
    seen = {}
    baggr.train(X, y, cfg, on_member=lambda e: seen.setdefault(e.member, e.measure_estimate))
    small = baggr.train(X, y, cfg.replace(threads=1))
    a = small.oob.arrays()
    fit = mf.class_fits(a["votes"], np.zeros(0, np.int32), np.asarray(a["target"], np.int32), 2, 64,
                        sample=cv.LIVE_ROWS, names=(measure,))[measure]
    e, v = fit.point(64)
    got = seen[64]
    assert got["name"] == measure and got["value"] == e and got["interval"] == fit.interval(e, v)
    assert got["members_needed"] == fit.members_needed() and got["limit"] == fit.limit
    assert seen[63] is None and seen[32] is not None


def test_stop_rule_reads_the_chosen_measures_members_needed():
    # the rule (job.stable_now) on the refits of the chosen measure: the run stops at its members_needed
    X, y = twonorm(400, seed=17)
    cfg = baggr.Config(members=3000, seed=18, threads=2, measure="brier")
    tr = Training(X, y, cfg)
    settings = RunSettings(stop_when_stable=True)
    stop = {}

    def should_stop():
        why = stable_now(tr.tally.needed, tr.next_member, settings, "brier")
        if why:
            stop["why"] = why
        return why is not None

    tr.run(on_member=lambda e: None, should_stop=should_stop)
    need = tr.tally.needed
    assert need and all(n > 0 for _, n in need)
    # the refits' members_needed are the brier fits' (not the error's)
    assert tr.tally.mest is not None and tr.tally.mest.measure == "brier"
    assert need[-1][1] == tr.tally.mest.members_needed()
    assert "brier limit" in stop["why"]
    # it stops at members_needed, or at the refit where the estimate of it settled when that came later
    assert tr.next_member == max(need[-1][1], need[-1][0]) < 3000


def test_journal_carries_the_measures_estimate_for_the_dashboard(tmp_path):
    # the refit lines and the end line carry the chosen measure's estimate; RunState keeps the latest,
    # and at the end it is the saved ensemble's own (oob.measure_estimate)
    import json
    from baggr.runs.run_state import RunState
    X, y = twonorm(400, seed=19)
    lines = []
    ens = baggr.train(X, y, baggr.Config(members=70, seed=20, measure="log-loss"),
                      on_member=lambda e: lines.append({"event": "member", **json.loads(json.dumps(e.journal_fields()))}))
    st = RunState()
    for ev in lines:
        st.fold(ev)
    assert [ev["member"] for ev in lines if "measure_estimate" in ev] == [32, 64]
    assert st.measure_estimate["member"] == 64 and st.measure_estimate["name"] == "log-loss"
    from baggr.events import MemberEvent
    final = ens.oob.figures(70, "log-loss")
    st.fold({"event": "end", "status": "finished", "member": 70, "estimate": MemberEvent.estimate_fields(final)})
    want = ens.oob.measure_estimate("log-loss")
    assert st.measure_estimate["member"] == 70 and st.measure_estimate["value"] == want["value"]
    assert st.measure_estimate["members_needed"] == want["members_needed"]
