"""OOB permutation importance (Breiman 2001, section 10) and the impurity decrease."""
import numpy as np
import pytest

import baggr
import naive
from baggr.engine import Training
from baggr.learn.rng import STREAM_IMPORTANCE, below, stream_state
from baggr.oob import importance as I
from generators import friedman1, twonorm, waveform


def _mixed_table(n, seed):
    """Numeric, categorical and missing cells, a three-class target (test data, no source)."""
    rng = np.random.default_rng(seed)
    a = rng.normal(size=n)
    b = rng.normal(size=n)
    b[rng.random(n) < 0.1] = np.nan
    colour = rng.choice(["red", "green", "blue", "grey"], n)
    y = np.where(a + (colour == "red") > 0.5, "hi", np.where(np.nan_to_num(b) > 0, "mid", "lo"))
    return {"a": a, "b": b, "colour": colour, "noise": rng.normal(size=n)}, y


def _naive_rises(codes, tree, rows, y, regression, seed, member):
    """Permute each feature's codes among the OOB rows with the member's stream (Fisher-Yates, the
    features in order), route every row from the root (naive.route) and sum the change in loss."""
    state = stream_state(seed, member, STREAM_IMPORTANCE)
    p = codes.shape[0]
    leaf0 = naive.route(codes, rows, tree)
    top = np.argmax(tree.value, axis=1)

    def loss(leaves):
        if regression:
            return (tree.value[leaves, 0] - y[rows]) ** 2
        return (top[leaves] != y[rows]).astype(float)

    base = loss(leaf0)
    out = np.zeros(p)
    for f in range(p):
        col = codes[f, rows].copy()
        for i in range(rows.shape[0] - 1, 0, -1):
            j = below(state, i + 1)
            col[i], col[j] = col[j], col[i]
        changed = codes.copy()
        changed[f, rows] = col
        diff = loss(naive.route(changed, rows, tree)) - base
        out[f] = sum(float(d) for d in diff if d != 0.0)   # in row order, as the kernel adds them
    return out


@pytest.mark.parametrize("task", ["classes", "regression", "wide"])
def test_member_rises_equal_a_brute_force_recount(task):
    if task == "classes":
        X, y = _mixed_table(600, seed=1)
    elif task == "wide":    # more than 64 features: the kernel's feature sets take two words
        X, y = friedman1(300, seed=12, p=70)
        task = "regression"
    else:
        X, y = friedman1(500, seed=2)
    cfg = baggr.Config(members=4, seed=3, importance=True, min_leaf=2, features_per_split=0.5)
    tr = Training(X, y, cfg)
    yy = tr.prep.y_class if task == "classes" else tr.prep.y_value
    for m in range(3):
        res = tr.grower.grow_member(m)
        rows = res.delta.rows
        want = _naive_rises(tr.prep.codes, res.tree, rows, yy, task == "regression", 3, m)
        np.testing.assert_allclose(res.importance.rise * rows.shape[0], want, rtol=1e-12, atol=1e-12)
        if task == "classes":
            # overall rise = the class rises weighted by the member's OOB rows of each class
            mi = res.importance
            w = mi.class_rows / mi.rows
            np.testing.assert_allclose(np.nansum(mi.class_rise * w, axis=1), mi.rise, rtol=1e-12, atol=1e-15)
        assert np.any(res.importance.rise != 0)


def test_impurity_decrease_telescopes_to_root_minus_leaves():
    # Each split's decrease is w(v) i(v) - w(l) i(l) - w(r) i(r) (Breiman et al. 1984, CART, ch. 4 and 5):
    # summed over all splits it telescopes to w(root) i(root) - sum over leaves of w i (from the definition).
    X, y = waveform(500, seed=4)
    tr = Training(X, y, baggr.Config(members=2, seed=5, importance=True))
    t = tr.grower.grow_member(0).tree
    leaves = t.left < 0
    want = (t.weight[0] * t.impurity[0] - np.sum(t.weight[leaves] * t.impurity[leaves])) / t.weight[0]
    got = I.impurity_decrease(t, X.shape[1])
    assert got.sum() == pytest.approx(want, rel=1e-12)
    assert np.all(got >= -1e-12)


def test_friedman1_signal_features_stand_out_and_noise_features_do_not():
    # Friedman (1991): y depends on x1..x5 only; x6..x10 are noise.
    X, y = friedman1(1000, seed=6)
    ens = baggr.train(X, y, baggr.Config(members=150, seed=7, importance=True))
    s = I.summary(ens.oob.arrays(), [f"x{j + 1}" for j in range(10)])
    rows = s["permutation"]
    for r in rows[:5]:
        assert r["mean"] > 3 * r["se"], r
    for r in rows[5:]:
        assert abs(r["mean"]) < 2 * r["se"], r
    assert s["members"] == 150


def test_importance_is_bit_identical_across_threads_resume_and_estimate_only():
    X, y = twonorm(400, seed=8)
    cfg = baggr.Config(members=30, seed=9, importance=True, threads=1)
    one = baggr.train(X, y, cfg).oob.arrays()
    two = baggr.train(X, y, cfg.replace(threads=2)).oob.arrays()
    lean = baggr.train(X, y, cfg.replace(keep_members=False, threads=2))
    assert lean.forest is None
    t = Training(X, y, cfg.replace(threads=2))
    t.run(until=11)
    arrays, header = t.checkpoint()
    again = Training(X, y, cfg.replace(threads=2))
    again.restore({k: np.array(v) for k, v in arrays.items()}, header, t.kept())
    resumed = again.run().oob.arrays()
    for other in (two, lean.oob.arrays(), resumed):
        for name in I.ImportanceTally.NAMES:
            np.testing.assert_array_equal(one[name], other[name], err_msg=name)
    # without --importance nothing is measured, and the rest of the run is the same
    plain = baggr.train(X, y, cfg.replace(importance=False)).oob.arrays()
    assert "imp_sum" not in plain
    np.testing.assert_array_equal(plain["votes"], one["votes"])


def test_model_file_keeps_importance_and_rejects_damage(tmp_path):
    X, y = waveform(300, seed=10)
    ens = baggr.train(X, y, baggr.Config(members=10, seed=11, importance=True))
    ens.save(tmp_path / "m.npz")
    back = baggr.load(tmp_path / "m.npz")
    names = [f"f{j}" for j in range(21)]
    assert I.summary(back.oob.arrays(), names, ["a", "b", "c"]) == I.summary(ens.oob.arrays(), names, ["a", "b", "c"])
    from baggr.model import npzfile
    header, arrays = npzfile.read(tmp_path / "m.npz", "model file")
    arrays["oob_imp_sum"] = arrays["oob_imp_sum"][:-1].copy()
    npzfile.write_atomic(tmp_path / "bad.npz", arrays, header)
    with pytest.raises(baggr.ModelFileError, match="importance"):
        baggr.load(tmp_path / "bad.npz")
