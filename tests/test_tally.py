"""Incremental tallies equal a recount from scratch after every member (incremental equals batch)."""
import numpy as np
import pytest

from baggr.oob.tally import MemberDelta, Tally

from naive_tally import recount_classes, recount_regression


def _random_deltas(rng, n, n_classes, members, soft):
    out = []
    for m in range(members):
        rows = np.flatnonzero(rng.random(n) < 0.37).astype(np.int32)
        if soft:
            v = rng.dirichlet(np.ones(n_classes), size=rows.size)
        else:
            v = np.zeros((rows.size, n_classes), np.int32)
            v[np.arange(rows.size), rng.integers(0, n_classes, rows.size)] = 1
        out.append(MemberDelta(m, rows, v))
    return out


@pytest.mark.parametrize("soft", [False, True])
def test_classes_incremental_equals_batch(soft):
    rng = np.random.default_rng(4)
    n, c, members = 300, 3, 25
    y = rng.integers(0, c, n).astype(np.int32)
    deltas = _random_deltas(rng, n, c, members, soft)
    t = Tally("classes", y, c, "shares" if soft else "hard", capacity=members)
    for m, d in enumerate(deltas):
        t.fold(d)
        ref = recount_classes(y, c, deltas[: m + 1])
        assert t.covered == ref["covered"]
        assert t.error() == pytest.approx(ref["error"], abs=0) if ref["covered"] else np.isnan(t.error())
        assert np.array_equal(t.confusion, ref["confusion"])
        np.testing.assert_array_equal(t.class_error(), ref["class_error"])
        np.testing.assert_array_equal(t.left_out, ref["left_out"])
        assert t.curve[m] == t.error() or (np.isnan(t.curve[m]) and np.isnan(t.error()))


def test_regression_incremental_equals_batch():
    rng = np.random.default_rng(5)
    n, members = 200, 30
    y = rng.normal(size=n)
    deltas = []
    for m in range(members):
        rows = np.flatnonzero(rng.random(n) < 0.37).astype(np.int32)
        deltas.append(MemberDelta(m, rows, rng.normal(size=rows.size)))
    t = Tally("regression", y, 1, "hard", capacity=members)
    for m, d in enumerate(deltas):
        t.fold(d)
        ref = recount_regression(y, deltas[: m + 1])
        assert t.covered == ref["covered"]
        assert t.error() == pytest.approx(ref["mse"], rel=1e-10)
        assert t.r2() == pytest.approx(ref["r2"], rel=1e-9)
        lo, hi = t.interval()
        assert (lo + hi) / 2 == pytest.approx(ref["mse"], rel=1e-9) or lo == 0.0


def test_tallies_add():
    # DESIGN.md invariant: the tally of a set of members is the sum of the tallies of its parts.
    rng = np.random.default_rng(6)
    n, c = 150, 2
    y = rng.integers(0, c, n).astype(np.int32)
    deltas = _random_deltas(rng, n, c, 12, soft=False)
    whole = Tally("classes", y, c, "hard", capacity=12)
    a = Tally("classes", y, c, "hard", capacity=12)
    b = Tally("classes", y, c, "hard", capacity=12)
    for d in deltas:
        whole.fold(d)
    for d in deltas[:5]:
        a.fold(d)
    for i, d in enumerate(deltas[5:]):
        b.fold(MemberDelta(i, d.rows, d.votes))
    np.testing.assert_array_equal(whole.votes, a.votes + b.votes)
    np.testing.assert_array_equal(whole.left_out, a.left_out + b.left_out)


@pytest.mark.parametrize("n_classes", [2, 3])
def test_hard_class_index_votes_incremental_equals_batch(n_classes):
    # the grow kernel's hard votes come as one class index per OOB row (two classes take their own
    # kernel); few members and few classes make ties common, and ties go to the lowest class
    rng = np.random.default_rng(7 + n_classes)
    n, members = 400, 20
    y = rng.integers(0, n_classes, n).astype(np.int32)
    t = Tally("classes", y, n_classes, "hard", capacity=4)  # capacity below members: the curve grows
    one_hot = []
    for m in range(members):
        rows = np.flatnonzero(rng.random(n) < 0.37).astype(np.int32)
        cls = rng.integers(0, n_classes, rows.size).astype(np.int32)
        t.fold(MemberDelta(m, rows, cls))
        hot = np.zeros((rows.size, n_classes), np.int32)
        hot[np.arange(rows.size), cls] = 1
        one_hot.append(MemberDelta(m, rows, hot))
        ref = recount_classes(y, n_classes, one_hot)
        assert t.covered == ref["covered"]
        assert np.array_equal(t.confusion, ref["confusion"])
        np.testing.assert_array_equal(t.class_error(), ref["class_error"])
        np.testing.assert_array_equal(t.class_curve[m], ref["class_error"])
        np.testing.assert_array_equal(t.left_out, ref["left_out"])
        covered = ref["left_out"] > 0
        np.testing.assert_array_equal(t.pred[covered], ref["pred"][covered])
        assert np.all(t.pred[~covered] == -1)
        assert t.curve[m] == ref["error"] or (np.isnan(t.curve[m]) and np.isnan(ref["error"]))
        iv = t.interval()
        assert iv is None or tuple(t.curve_interval[m]) == iv


def test_two_class_kernel_equals_general_kernel():
    # the same hard votes as class indices (two-class kernel) and one-hot (general kernel): every
    # array of the tally and every point of the curves bit for bit
    rng = np.random.default_rng(9)
    n, members = 500, 15
    y = rng.integers(0, 2, n).astype(np.int32)
    a = Tally("classes", y, 2, "hard", capacity=members)
    b = Tally("classes", y, 2, "hard", capacity=members)
    for m in range(members):
        rows = np.flatnonzero(rng.random(n) < 0.37).astype(np.int32)
        cls = rng.integers(0, 2, rows.size).astype(np.int32)
        hot = np.zeros((rows.size, 2), np.int32)
        hot[np.arange(rows.size), cls] = 1
        a.fold(MemberDelta(m, rows, cls))
        b.fold(MemberDelta(m, rows, hot))
        for name, arr in b.arrays().items():
            np.testing.assert_array_equal(a.arrays()[name], arr, err_msg=name)
