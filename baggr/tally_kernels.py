"""numba kernels that fold one member's out-of-bag votes into the running tallies, in O(OOB rows)."""
import numpy as np

from .jit import kernel


@kernel
def _argmax_row(votes, r):
    """Class with the most votes for row r; ties go to the lowest class index."""
    best = 0
    for c in range(1, votes.shape[1]):
        if votes[r, c] > votes[r, best]:
            best = c
    return best


@kernel
def fold_classes(rows, row_votes, y, votes, pred, left_out, confusion, class_wrong, class_covered, totals):
    """Add one member's votes for its OOB rows and update every running count incrementally.

    rows: int32 OOB rows; row_votes: (len(rows), C) votes the member casts for each (one-hot for hard
    votes, leaf class shares otherwise); votes: (n, C) running tally; pred: int32 current OOB class per
    row (-1: never out of bag); confusion[true, pred]; totals = [wrong, covered] (int64).
    """
    n_classes = votes.shape[1]
    for i in range(rows.shape[0]):
        r = rows[i]
        for c in range(n_classes):
            votes[r, c] += row_votes[i, c]
        left_out[r] += 1
        t = y[r]
        old = pred[r]
        new = _argmax_row(votes, r)
        if old == new:
            continue
        if old < 0:
            totals[1] += 1
            class_covered[t] += 1
        else:
            confusion[t, old] -= 1
            if old != t:
                totals[0] -= 1
                class_wrong[t] -= 1
        confusion[t, new] += 1
        if new != t:
            totals[0] += 1
            class_wrong[t] += 1
        pred[r] = new


@kernel
def fold_regression(rows, row_values, y, value_sum, left_out, sq_err, sums):
    """Add one member's predictions for its OOB rows and update the running squared-error sums.

    sq_err[r]: current squared error of row r's OOB mean; sums = [sse, sum of sq_err**2, covered,
    sum y, sum y**2] over covered rows (floats; folded in member order, so identical everywhere).
    """
    for i in range(rows.shape[0]):
        r = rows[i]
        value_sum[r] += row_values[i]
        left_out[r] += 1
        d = value_sum[r] / left_out[r] - y[r]
        e = d * d
        if left_out[r] == 1:
            sums[2] += 1.0
            sums[3] += y[r]
            sums[4] += y[r] * y[r]
        else:
            old = sq_err[r]
            sums[0] -= old
            sums[1] -= old * old
        sums[0] += e
        sums[1] += e * e
        sq_err[r] = e
