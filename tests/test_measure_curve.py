"""The measure curve: log-spaced sizes, computed as the run goes, equal to a recount at each size."""
import numpy as np
import pytest

import baggr
from baggr.engine import Training
from baggr.oob import measure_curve as mc
from baggr.oob import measures as M
from generators import friedman1, waveform


def test_schedule_has_every_size_then_log_spaced_and_at_least_40_points():
    s = mc.sizes_up_to(100_000)
    assert s[:40] == list(range(1, 41))
    ratios = np.array(s[41:]) / np.array(s[40:-1])
    assert np.all(ratios > 1.0) and np.all(ratios < 1.12)        # 32 a decade: 10 ** (1/32) = 1.075
    for m in (40, 41, 57, 100, 1000, 99_999):
        assert len(mc.sizes_up_to(m)) >= 40
        assert mc.sizes_up_to(m) == [b for b in s if b <= m]
    for b in (1, 39, 40, 41, 99, 5000):
        assert mc.next_size(b) == min(x for x in s if x > b)


def _row(values, names):
    return np.array([[values[n][0], *(values[n][1] or (np.nan, np.nan))] for n in names])


@pytest.mark.parametrize("vote", ["hard", "shares"])
def test_curve_points_equal_a_recount_of_a_run_of_that_size(vote):
    # incremental equals batch: member m depends only on (seed, m), so a run of b members has
    # the tallies the long run had after b members; its measures are the curve's point at b
    X, y = waveform(400, seed=1)
    cfg = baggr.Config(members=45, seed=2, vote=vote, threads=2)
    ens = baggr.train(X, y, cfg)
    sizes, curves = mc.curve_of(ens.oob, raw=True)
    assert sizes == mc.sizes_up_to(45)
    est_sizes, estimates = mc.curve_of(ens.oob)
    assert est_sizes == sizes
    names = M.CLASS_MEASURES
    curve, band = ens.oob.raw_curve, ens.oob.raw_curve_interval
    for b in (1, 7, 43):
        small = baggr.train(X, y, cfg.replace(members=b))
        got = np.array([curves[n][sizes.index(b)] for n in names])
        want = M.class_measures(small.oob.arrays()["target"], small.oob.arrays()["votes"],
                                share_bins=mc.SHARE_BINS if vote == "shares" else None)
        # the textbook figures: every measure but the error is a recount of the tallies of b members ...
        np.testing.assert_allclose(got[1:], _row(want, names)[1:], rtol=1e-12, atol=0)
        # ... and the error the textbook OOB curve at b
        np.testing.assert_array_equal(got[0], [curve[b - 1], *band[b - 1]])
        # the estimates for the kept b-member ensemble: the view's curve of each measure at b (three
        # classes: the AUC has none, its textbook point stands)
        assert set(ens.oob.measure_fits()) == set(names) - {"auc"}
        np.testing.assert_array_equal(estimates["auc"][sizes.index(b)], got[-1])
        for n in names[:-1]:
            e, iv = ens.oob.measure_curve(n)
            np.testing.assert_array_equal(estimates[n][sizes.index(b)], [e[b - 1], *iv[b - 1]])
    # the final figures: the same functions on the whole run; the error is the view's own (estimated)
    # one in oob.measures(), the textbook one (share of rows whose OOB vote is wrong) in of_oob
    final = ens.oob.measures()
    assert final["error"] == (ens.oob.error, tuple(ens.oob.interval))
    assert set(final) == set(names)
    textbook = ens.oob.raw_curve if hasattr(ens.oob, "raw_curve") else ens.oob.curve   # before any correction
    assert M.of_oob(ens.oob)["error"][0] == pytest.approx(textbook[-1], rel=1e-12)


def test_curve_is_bit_identical_across_threads_and_a_resume():
    X, y = friedman1(300, seed=3)
    cfg = baggr.Config(members=50, seed=4, threads=1)
    one = baggr.train(X, y, cfg).oob.arrays()
    two = baggr.train(X, y, cfg.replace(threads=2)).oob.arrays()
    t = Training(X, y, cfg.replace(threads=2))
    t.run(until=23)
    arrays, header = t.checkpoint()
    again = Training(X, y, cfg.replace(threads=2))
    again.restore({k: np.array(v) for k, v in arrays.items()}, header, t.kept())
    resumed = again.run().oob.arrays()
    for other in (two, resumed):
        for name in ("measure_sizes", "measure_values", "measure_names", "target"):
            np.testing.assert_array_equal(one[name], other[name])
    assert mc.decode_names(one["measure_names"]) == list(M.REGRESSION_MEASURES)


def test_member_events_carry_the_measures_at_the_scheduled_sizes():
    X, y = waveform(200, seed=5)
    seen = []
    baggr.train(X, y, baggr.Config(members=48, seed=6),
                on_member=lambda e: seen.append((e.member, e.journal_fields().get("measures"))))
    with_measures = [m for m, f in seen if f is not None]
    assert with_measures == mc.sizes_up_to(48)
    m, f = seen[-2]   # 47: not scheduled (43, 46, 50, ...)
    assert f is None
    f = dict(seen)[46]
    assert set(f) == set(M.CLASS_MEASURES) and len(f["auc"]) == 3 and 0.5 < f["auc"][0] <= 1.0


def test_model_file_keeps_the_curve_and_rejects_a_damaged_one(tmp_path):
    X, y = waveform(200, seed=7)
    ens = baggr.train(X, y, baggr.Config(members=12, seed=8))
    ens.save(tmp_path / "m.npz")
    back = baggr.load(tmp_path / "m.npz")
    for name in ("measure_sizes", "measure_values", "target"):
        np.testing.assert_array_equal(back.oob.arrays()[name], ens.oob.arrays()[name])
    from baggr.model import npzfile
    header, arrays = npzfile.read(tmp_path / "m.npz", "model file")
    arrays["oob_measure_sizes"] = arrays["oob_measure_sizes"][::-1].copy()
    npzfile.write_atomic(tmp_path / "bad.npz", arrays, header)
    with pytest.raises(baggr.ModelFileError, match="not ascending"):
        baggr.load(tmp_path / "bad.npz")


def _leaf_share_votes(n, n_classes, step, seed):
    """OOB votes of leaf shares: each row left out by 0-39 members, each of which votes its leaf's
    class shares; pure leaves (step 1) give whole numbers, leaves of five rows (step 5) fifths. The
    shares lean toward the row's class, so the AUC is far from 1/2 and from 1."""
    rng = np.random.default_rng(seed)
    y = rng.integers(0, n_classes, n).astype(np.int32)
    k = rng.integers(0, 40, n)
    votes = np.zeros((n, n_classes))
    for r in range(n):
        p = np.full(n_classes, 0.4 / n_classes)
        p[y[r]] += 0.6
        votes[r] = rng.multinomial(k[r] * step, p) / step
    return y, votes


@pytest.mark.parametrize("n_classes", [2, 3])
@pytest.mark.parametrize("step", [1, 5])
def test_curve_measures_of_leaf_shares_equal_the_obvious_computation(n_classes, step):
    # The curve counts whole leaf shares (pure leaves) per (k, v) cell and bins fractional ones in one
    # pass; both must give what the definitions give row by row (tests/naive_measures.py, scipy).
    from scipy import stats

    import naive_measures as naive
    y, votes = _leaf_share_votes(3000, n_classes, step, seed=10 * n_classes + step)
    got = mc.curve_class_measures(y, votes)
    ok, s = naive.shares_of(votes)
    yy = y[ok]
    wrong = np.argmax(s, axis=1) != yy                    # ties to the lowest class, as argmax
    assert got["error"][0] == pytest.approx(wrong.mean(), rel=1e-12)
    per_class = [wrong[yy == c].mean() for c in range(n_classes)]
    assert got["balanced-error"][0] == pytest.approx(np.mean(per_class), rel=1e-12)
    assert got["log-loss"][0] == pytest.approx(naive.log_loss(y, votes), rel=1e-12)
    assert got["brier"][0] == pytest.approx(naive.brier(y, votes), rel=1e-12)
    # AUC: Mann-Whitney U / (n1 n0) of each class's share (scipy), the macro mean for three classes
    which = [1] if n_classes == 2 else range(n_classes)
    aucs, bounds = [], []
    for c in which:
        pos, neg = s[yy == c, c], s[yy != c, c]
        aucs.append(stats.mannwhitneyu(pos, neg).statistic / (pos.size * neg.size))
        # shares binned at SHARE_BINS count as tied within a bin: the AUC moves by at most half the
        # share of positive-negative pairs that share a bin (measures.class_measures' docstring)
        bins = np.minimum((s[:, c] * mc.SHARE_BINS).astype(np.int64), mc.SHARE_BINS - 1)
        same = np.bincount(bins[yy == c], minlength=mc.SHARE_BINS) @ np.bincount(bins[yy != c],
                                                                               minlength=mc.SHARE_BINS)
        bounds.append(0.5 * same / (pos.size * neg.size))
    if step == 1:    # whole shares: counted exactly
        assert got["auc"][0] == pytest.approx(np.mean(aucs), rel=1e-12)
    else:
        assert abs(got["auc"][0] - np.mean(aucs)) <= np.mean(bounds) + 1e-12
    if n_classes == 2 and step == 1:    # DeLong's variance by its double loop (naive_measures)
        pos, neg = s[yy == 1, 1], s[yy == 0, 1]
        half = 1.959963984540054 * np.sqrt(naive.delong_variance(pos, neg))
        np.testing.assert_allclose(got["auc"][1], (np.mean(aucs) - half, np.mean(aucs) + half), rtol=1e-9)
    # the intervals of the per-row measures: the report's own computation (rows sorted exactly)
    exact = M.class_measures(y, votes)
    for name in ("error", "balanced-error", "log-loss", "brier"):
        np.testing.assert_allclose(got[name][1], exact[name][1], rtol=1e-12)
