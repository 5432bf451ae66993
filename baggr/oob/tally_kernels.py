"""numba kernels that fold one member's out-of-bag votes into the running tallies, in O(OOB rows)."""
import numba
import numpy as np

from baggr.jit import KERNEL, kernel

# inlined at numba's IR level: a call per row would count references to every array, atomically
inline = numba.njit(inline="always", **KERNEL)


@inline
def _argmax_row(votes, r):
    """Class with the most votes for row r; ties go to the lowest class index."""
    best = 0
    for c in range(1, votes.shape[1]):
        if votes[r, c] > votes[r, best]:
            best = c
    return best


@inline
def _counts_from_confusion(confusion, class_wrong, class_covered, totals):
    """Per-class covered and wrong counts and totals = [wrong, covered], read off confusion[true, pred]."""
    n_classes = confusion.shape[0]
    totals[0] = 0
    totals[1] = 0
    for t in range(n_classes):
        covered = 0
        for c in range(n_classes):
            covered += confusion[t, c]
        class_covered[t] = covered
        class_wrong[t] = covered - confusion[t, t]
        totals[0] += class_wrong[t]
        totals[1] += covered


@kernel
def fold_classes(rows, row_votes, row_class, y, votes, pred, left_out, confusion, class_wrong, class_covered,
                 totals):
    """Add one member's votes for its OOB rows and update every running count incrementally.

    rows: int32 OOB rows; row_votes: (len(rows), C) votes the member casts for each (one-hot for hard
    votes, leaf class shares otherwise), or empty (0, C) when row_class holds one int32 hard-vote
    class per row instead; votes: (n, C) running tally; pred: int32 current OOB class per row
    (-1: never out of bag); confusion[true, pred]; totals = [wrong, covered] (int64).
    pred and left_out empty (hard votes): not kept; a row's old class is read off its votes.
    """
    n_classes = votes.shape[1]
    by_class = row_votes.shape[0] < rows.shape[0]
    derive = pred.shape[0] == 0
    for i in range(rows.shape[0]):
        r = rows[i]
        if derive and n_classes == 2:
            # branch-free: which class leads is as good as a coin toss from row to row
            a = votes[r, 0]
            b = votes[r, 1]
            old = np.int64(b > a) if a + b > 0 else np.int64(-1)
        elif derive:
            tot = votes[r, 0]
            old = 0
            for c in range(1, n_classes):
                tot += votes[r, c]
                if votes[r, c] > votes[r, old]:
                    old = c
            if tot == 0:
                old = -1
        else:
            old = np.int64(pred[r])
        if by_class:
            # one more vote for class c: the lowest-index maximum is now c or stays old
            c = np.int64(row_class[i])
            votes[r, c] += 1
            vc = votes[r, c]
            vo = votes[r, max(old, 0)]
            take = (old < 0) | (vc > vo) | ((vc == vo) & (c < old))
            new = c if take else old
        else:
            for c in range(n_classes):
                votes[r, c] += row_votes[i, c]
            new = _argmax_row(votes, r)
        if not derive:
            left_out[r] += 1
        if new != old:
            t = y[r]
            if old >= 0:
                confusion[t, old] -= 1
            confusion[t, new] += 1
            if not derive:
                pred[r] = new
    # the other counts follow from the confusion matrix: recounted once, not updated per row
    _counts_from_confusion(confusion, class_wrong, class_covered, totals)


@kernel
def fold_two_hard(rows, row_class, y, votes, confusion, class_wrong, class_covered, totals):
    """fold_classes for two classes and hard votes (row_class: int32 0 or 1 per OOB row), without a
    branch or a confusion-matrix store per row.

    A row's OOB class is 1 when votes[r, 1] > votes[r, 0] (ties to class 0), which is 0 for a row
    with no votes yet, so the change of its class is new - old with no special case; a row is
    newly covered when it had no votes. The confusion matrix follows from four sums over the rows
    (each row's true class t picks which sums it enters), added once at the end.
    """
    newly = np.int64(0)     # rows covered for the first time
    newly_1 = np.int64(0)   # ... of true class 1
    moved = np.int64(0)     # change in rows predicted class 1
    moved_1 = np.int64(0)   # ... of true class 1
    for i in range(rows.shape[0]):
        r = rows[i]
        a = votes[r, 0]
        b = votes[r, 1]
        c = row_class[i]
        first = np.int64(a + b == 0)
        old = np.int64(b > a)
        a += 1 - c
        b += c
        votes[r, 0] = a
        votes[r, 1] = b
        change = np.int64(b > a) - old
        t = np.int64(y[r])
        newly += first
        newly_1 += t * first
        moved += change
        moved_1 += t * change
    # a newly covered row adds one at (t, new), a moved one shifts one from (t, old) to (t, new)
    confusion[1, 1] += moved_1
    confusion[1, 0] += newly_1 - moved_1
    confusion[0, 1] += moved - moved_1
    confusion[0, 0] += (newly - newly_1) - (moved - moved_1)
    _counts_from_confusion(confusion, class_wrong, class_covered, totals)


@kernel
def fold_regression(rows, row_values, y, value_sum, value_m2, left_out, sq_err, sums):
    """Add one member's predictions for its OOB rows and update the running squared-error sums.

    sq_err[r]: current squared error of row r's OOB mean; sums = [sse, sum of sq_err**2, covered,
    sum y, sum y**2] over covered rows (floats; folded in member order, so identical everywhere).
    value_m2[r]: sum of squared deviations of row r's OOB predictions from their mean (Welford 1962),
    for the spread of a member's prediction that the estimated curve needs.
    """
    for i in range(rows.shape[0]):
        r = rows[i]
        x = row_values[i]
        k_old = left_out[r]
        mean_old = value_sum[r] / k_old if k_old > 0 else 0.0
        value_sum[r] += x
        left_out[r] += 1
        mean = value_sum[r] / left_out[r]
        value_m2[r] += (x - mean_old) * (x - mean) if k_old > 0 else 0.0
        d = mean - y[r]
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


@kernel
def hard_pred(votes, pred):
    """pred[r] = the class with the most hard votes for row r (ties to the lowest), -1 without votes:
    what np.where(votes.any(1), np.argmax(votes, 1), -1) gives, in one pass and no temporaries."""
    for r in range(votes.shape[0]):
        any_vote = False
        for c in range(votes.shape[1]):
            if votes[r, c] != 0:
                any_vote = True
        pred[r] = _argmax_row(votes, r) if any_vote else -1
