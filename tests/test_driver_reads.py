"""The driver's quick reads between members (bench/fold_cost.py) against the plain numpy they replace:
a fit read at a run's sizes from a block of sizes, the filled (k, v) cells of a measure point and the
OOB class of hard votes, equal to the bit."""
import numpy as np
import pytest

from baggr.oob import curve
from baggr.oob import measure_kernels as mk
from baggr.oob import tally_kernels as tk
from baggr.oob.tally import MemberDelta, Tally


def _bits(x):
    return np.asarray(x, np.float64).tobytes()


@pytest.mark.parametrize("n_classes", [2, 3])
def test_fit_read_by_blocks_equals_np_interp_per_size(n_classes):
    # Fit.point / class_point read from a block of BLOCK sizes interpolated at once; Fit.at, var_at
    # and class_at of a fresh Fit (np.interp at the one size, numpy's own linear interpolation)
    # must give the same doubles, in a run's order (ascending) and in any other
    rng = np.random.default_rng(5)
    n, members = 600, 70
    y = rng.integers(0, n_classes, n).astype(np.int32)
    t = Tally("classes", y, n_classes, "hard", capacity=members)
    for m in range(members):
        rows = np.flatnonzero(rng.random(n) < 0.37).astype(np.int32)
        t.fold(MemberDelta(m, rows, rng.integers(0, n_classes, rows.size).astype(np.int32)))
    f = t.fit()
    sizes = list(range(1, 700)) + [int(b) for b in rng.integers(1, 1 << 23, 300)] + [3, 900, 65, 64, 5000]
    for b in sizes:
        fresh = curve.Fit(f.task, f.members, f.sizes, f.error, f.var, f.class_error, f.class_var)
        e, v = f.point(b)
        assert _bits([e, v]) == _bits([fresh.at(b)[0], fresh.var_at(b)[0]]), b
        assert _bits(f.class_point(b)) == _bits(fresh.class_at(b)[0]), b
    assert f.__dict__["_blk"][0] == 5000   # the last read filled a block from there


@pytest.mark.parametrize("n_cells,fill", [(0, 0.5), (1, 1.0), (1000, 0.1), (70000, 0.01), (5000, 0.0)])
def test_filled_cells_equal_np_flatnonzero(n_cells, fill):
    # numpy: np.flatnonzero of the summed counts
    rng = np.random.default_rng(n_cells)
    cells = np.zeros((n_cells, 2), np.int64)
    hit = rng.random(n_cells) < fill
    cells[hit, rng.integers(0, 2, int(hit.sum()))] = rng.integers(1, 9, int(hit.sum()))
    got = mk.filled_cells(cells)
    want = np.flatnonzero(cells[:, 0] + cells[:, 1])
    assert got.dtype == want.dtype and np.array_equal(got, want)


@pytest.mark.parametrize("n_classes", [2, 3, 6])
def test_hard_pred_equals_numpy_argmax(n_classes):
    # numpy: argmax takes the first of equal maxima (ties to the lowest class), -1 for rows with no vote
    rng = np.random.default_rng(n_classes)
    votes = rng.integers(0, 3, (5000, n_classes)).astype(np.int32)
    votes[rng.random(5000) < 0.2] = 0
    pred = np.empty(5000, np.int32)
    tk.hard_pred(votes, pred)
    assert np.array_equal(pred, np.where(votes.any(axis=1), np.argmax(votes, axis=1), -1))
    t = Tally("classes", rng.integers(0, n_classes, 5000).astype(np.int32), n_classes, "hard", capacity=1)
    t.votes[...] = votes
    assert t.pred.dtype == np.int32 and np.array_equal(t.pred, pred)
