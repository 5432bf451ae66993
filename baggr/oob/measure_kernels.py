"""numba kernels behind the OOB measures: one pass over the rows gathers what every measure needs.

Hard votes make a row's OOB share of class c the fraction v_c / k (k: its OOB votes), so every
rank-based or per-row figure depends on the row only through the pair (k, v): the row pass
counts rows per (k, v) cell, and the measures are then summed over cells, a few thousand of
them, instead of sorting the rows.
"""
import numpy as np

from baggr.jit import kernel


@kernel
def vote_range(votes):
    """(smallest, largest) number of OOB votes over the rows that have any; (0, -1) when none has."""
    big = np.int64(1) << 62
    kmin = big
    kmax = np.int64(-1)
    if votes.shape[1] == 2:     # branch-free: min and max compile to selects
        for r in range(votes.shape[0]):
            k = np.int64(votes[r, 0]) + np.int64(votes[r, 1])
            kmax = max(kmax, k)
            kmin = min(kmin, k if k > 0 else big)
    else:
        for r in range(votes.shape[0]):
            k = np.int64(0)
            for c in range(votes.shape[1]):
                k += votes[r, c]
            kmax = max(kmax, k)
            kmin = min(kmin, k if k > 0 else big)
    if kmax <= 0:
        return np.int64(0), np.int64(-1)
    return kmin, kmax


@kernel
def two_class_cells(y, votes, kmin, width, cells):
    """Two classes, hard votes: cells[(k - kmin) * width + v_1, y] += 1 for every row with k > 0
    votes (v_1: its votes for the second class). Every two-class measure is a sum over these cells."""
    for r in range(votes.shape[0]):
        v1 = np.int64(votes[r, 1])
        kk = np.int64(votes[r, 0]) + v1
        if kk > 0:
            cells[(kk - kmin) * width + v1, y[r]] += 1


@kernel
def filled_cells(cells):
    """Ascending indices i of the cells with cells[i, 0] + cells[i, 1] != 0 (np.flatnonzero of that
    sum, without the temporary: the cell grid grows with the members, the filled cells far less)."""
    n = 0
    for i in range(cells.shape[0]):
        if cells[i, 0] + cells[i, 1] != 0:
            n += 1
    out = np.empty(n, np.int64)
    j = 0
    for i in range(cells.shape[0]):
        if cells[i, 0] + cells[i, 1] != 0:
            out[j] = i
            j += 1
    return out


@kernel
def class_cells(y, votes, kmin, width, first_class, true_cells, rank_cells, class_covered, class_wrong, brier):
    """Counts of rows per (votes k, votes v) cell, and the per-row sums that need no cells.

    votes: int32 (n, C) OOB hard votes; a row with k > 0 votes falls in cell (k - kmin) * width + v.
    true_cells[cell of (k, v_y)] += 1 (y the row's class: log loss reads these);
    rank_cells[a, cell of (k, v_c), y == c] += 1 for c = first_class + a (AUC reads these);
    class_covered[y] += 1, class_wrong[y] += 1 when the OOB class (most votes, ties to the lowest
    class) is not y; brier += [loss, loss**2] with loss = sum_c (v_c / k - [y == c])**2.
    """
    n_classes = votes.shape[1]
    for r in range(votes.shape[0]):
        k = np.int64(0)
        best = 0
        for c in range(n_classes):
            k += votes[r, c]
            if votes[r, c] > votes[r, best]:
                best = c
        if k == 0:
            continue
        t = np.int64(y[r])
        base = (k - kmin) * width
        true_cells[base + votes[r, t]] += 1
        for a in range(rank_cells.shape[0]):
            c = first_class + a
            rank_cells[a, base + votes[r, c], np.int64(t == c)] += 1
        class_covered[t] += 1
        class_wrong[t] += np.int64(best != t)
        inv = 1.0 / k
        loss = 0.0
        for c in range(n_classes):
            d = votes[r, c] * inv - (1.0 if c == t else 0.0)
            loss += d * d
        brier[0] += loss
        brier[1] += loss * loss


@kernel
def class_rows(y, votes, sums, class_covered, class_wrong):
    """Log loss and Brier sums over covered rows for votes of any kind (float64 share sums or int32
    counts), and per-class covered and wrong counts: sums += [log loss, its square, Brier, its square].

    log loss: -log((v_y + 1/2) / (k + C/2)), the share smoothed by Krichevsky and Trofimov (1981)
    (see measures.py); Brier: sum_c (v_c / k - [y == c])**2 (Brier 1950).
    """
    n_classes = votes.shape[1]
    half_c = 0.5 * n_classes
    for r in range(votes.shape[0]):
        k = 0.0
        best = 0
        for c in range(n_classes):
            k += votes[r, c]
            if votes[r, c] > votes[r, best]:
                best = c
        if not k > 0.0:
            continue
        t = np.int64(y[r])
        ll = -np.log((votes[r, t] + 0.5) / (k + half_c))
        loss = 0.0
        for c in range(n_classes):
            d = votes[r, c] / k - (1.0 if c == t else 0.0)
            loss += d * d
        sums[0] += ll
        sums[1] += ll * ll
        sums[2] += loss
        sums[3] += loss * loss
        class_covered[t] += 1
        class_wrong[t] += np.int64(best != t)


@kernel
def share_bins(y, votes, first_class, cells):
    """cells[a, bin of share_c, y == c] += 1 for c = first_class + a over covered rows: the share
    v_c / k put in one of cells.shape[1] equal bins of [0, 1] (votes of any kind)."""
    n_bins = cells.shape[1]
    for r in range(votes.shape[0]):
        k = 0.0
        for c in range(votes.shape[1]):
            k += votes[r, c]
        if not k > 0.0:
            continue
        for a in range(cells.shape[0]):
            c = first_class + a
            b = min(np.int64(votes[r, c] / k * n_bins), n_bins - 1)
            cells[a, b, np.int64(y[r] == c)] += 1


@kernel
def class_influence(y, classes, groups, theta, place_pos, place_neg, n_pos, n_neg):
    """Per-row influence on the mean of several one-vs-rest AUCs: sum of squares over covered rows.

    classes: int64 (A,) the class each column of groups is about; groups: int32 (n, A) each row's
    rank group under that class's score (-1: not covered);
    place_pos[a, g] / place_neg[a, g]: DeLong's placement values of a positive / negative row in
    group g; the row's term for class a is (placement - theta[a]) / (its side's count), and the
    terms of the A classes are averaged (the macro mean is linear in them).
    """
    n_a = groups.shape[1]
    total = 0.0
    for r in range(groups.shape[0]):
        if groups[r, 0] < 0:
            continue
        phi = 0.0
        for a in range(n_a):
            g = groups[r, a]
            if y[r] == classes[a]:
                phi += (place_pos[a, g] - theta[a]) / n_pos[a]
            else:
                phi += (place_neg[a, g] - theta[a]) / n_neg[a]
        phi /= n_a
        total += phi * phi
    return total


@kernel
def regression_sums(y, value_sum, left_out):
    """Sums over covered rows (left_out > 0) of their OOB errors e = mean - y:
    [n, sum e^2, sum e^4, sum |e|, sum y, sum y^2] (sum e^2 is also the sum of |e|^2)."""
    out = np.zeros(6)
    for r in range(y.shape[0]):
        if left_out[r] <= 0:
            continue
        e = value_sum[r] / left_out[r] - y[r]
        e2 = e * e
        out[0] += 1.0
        out[1] += e2
        out[2] += e2 * e2
        out[3] += abs(e)
        out[4] += y[r]
        out[5] += y[r] * y[r]
    return out


@kernel
def r2_influence(y, value_sum, left_out, mse, mean_y, var_y):
    """Sum over covered rows of the squared influence of R^2 = 1 - MSE / Var(y) (delta method):
    IF = -(e^2 - MSE) / Var + MSE ((y - mean)^2 - Var) / Var^2."""
    total = 0.0
    for r in range(y.shape[0]):
        if left_out[r] <= 0:
            continue
        e = value_sum[r] / left_out[r] - y[r]
        dy = y[r] - mean_y
        f = -(e * e - mse) / var_y + mse * (dy * dy - var_y) / (var_y * var_y)
        total += f * f
    return total


@kernel
def whole_votes(votes, most):
    """True when every vote is a whole number from 0 to `most`: leaf-share votes of members whose
    leaves are all pure (full trees), which then count like hard votes. Stops at the first that is not."""
    for r in range(votes.shape[0]):
        for c in range(votes.shape[1]):
            v = votes[r, c]
            if not (v >= 0.0 and v <= most and v == np.floor(v)):
                return False
    return True

