"""numba kernels of the estimated curve: per-row vote cells, the smoothed-EM prior fit and its
influence on the estimate (see baggr/oob/curve.py for the method and its sources).

Plain loops in a fixed order throughout (no BLAS): the same tally gives the same figures bit for
bit in any process and at any thread count.
"""
import math

import numpy as np

from baggr.jit import kernel


@kernel
def class_cells(votes, left_out, y, target, dims, rival, stride):
    """Count the rows of true class `target` by their OOB vote cell.

    votes: (n, C) vote tally (int counts, or float share sums rounded to whole votes); left_out:
    (n,) OOB members per row (used when votes are shares; empty for hard votes, whose sum is the
    count). A row's cell is (k, v_0, .., v_{dims-1}): k OOB votes, v_0 for its own class, then
    (dims = 2, three classes) the lower-indexed other class, or (rival = 1, four or more classes)
    the other class with the most votes. Only rows r with r % stride == 0 count.
    Returns (cells (m, 1 + dims) int64, counts (m,) int64), sorted by cell.
    """
    n, c = votes.shape
    if dims == 1:
        return _cells_dense(votes, left_out, y, target, stride)
    keys = np.empty(n, np.int64)
    m = 0
    for r in range(0, n, stride):
        if y[r] != target:
            continue
        if left_out.shape[0] > 0:
            k = np.int64(left_out[r])
        else:
            k = np.int64(0)
            for j in range(c):
                k += np.int64(votes[r, j])
        if k == 0:
            continue
        v0 = min(k, np.int64(math.floor(votes[r, target] + 0.5)))
        key = k * (k + 2) + v0
        if dims == 2:
            if rival:
                best = -1
                for j in range(c):
                    if j != target and (best < 0 or votes[r, j] > votes[r, best]):
                        best = j
                other = votes[r, best]
            else:
                other = votes[r, 1 if target == 0 else 0]
            v1 = min(k - v0, np.int64(math.floor(other + 0.5)))
            key = (k * (k + 2) + v0) * (k + 2) + v1
        keys[m] = key
        m += 1
    keys = np.sort(keys[:m])
    n_cells = 0
    for i in range(m):
        if i == 0 or keys[i] != keys[i - 1]:
            n_cells += 1
    cells = np.zeros((n_cells, 1 + dims), np.int64)
    counts = np.zeros(n_cells, np.int64)
    j = -1
    for i in range(m):
        if i == 0 or keys[i] != keys[i - 1]:
            j += 1
            key = keys[i]
            if dims == 2:
                # key = (k (k + 2) + v0) (k + 2) + v1 with v0, v1 <= k: k from the integer root
                k = np.int64(math.floor((key) ** (1.0 / 3.0)))
                while (k + 1) * (k + 3) * (k + 3) <= key:
                    k += 1
                while k > 0 and k * (k + 2) * (k + 2) > key:
                    k -= 1
                rest = key - k * (k + 2) * (k + 2)
                cells[j, 0] = k
                cells[j, 1] = rest // (k + 2)
                cells[j, 2] = rest % (k + 2)
            else:
                k = np.int64(math.floor(math.sqrt(key)))
                while (k + 1) * (k + 3) <= key:
                    k += 1
                while k > 0 and k * (k + 2) > key:
                    k -= 1
                cells[j, 0] = k
                cells[j, 1] = key - k * (k + 2)
        counts[j] += 1
    return cells, counts


@kernel
def _cells_dense(votes, left_out, y, target, stride):
    """class_cells for one probability per row, (k, v) counted in a table over the k that occur
    (no sort: two passes over the rows and one over the table)."""
    n, c = votes.shape
    kmin, kmax = np.int64(1) << 62, np.int64(0)
    for r in range(0, n, stride):
        if y[r] != target:
            continue
        k = _row_k(votes, left_out, r, c)
        if k > 0:
            kmin = min(kmin, k)
            kmax = max(kmax, k)
    if kmax == 0:
        return np.zeros((0, 2), np.int64), np.zeros(0, np.int64)
    table = np.zeros((kmax - kmin + 1, kmax + 1), np.int64)
    for r in range(0, n, stride):
        if y[r] != target:
            continue
        k = _row_k(votes, left_out, r, c)
        if k > 0:
            v = min(k, np.int64(math.floor(votes[r, target] + 0.5)))
            table[k - kmin, v] += 1
    n_cells = 0
    for i in range(table.shape[0]):
        for v in range(table.shape[1]):
            if table[i, v] > 0:
                n_cells += 1
    cells = np.zeros((n_cells, 2), np.int64)
    counts = np.zeros(n_cells, np.int64)
    j = 0
    for i in range(table.shape[0]):
        for v in range(table.shape[1]):
            if table[i, v] > 0:
                cells[j, 0] = kmin + i
                cells[j, 1] = v
                counts[j] = table[i, v]
                j += 1
    return cells, counts


@kernel
def _row_k(votes, left_out, r, c):
    if left_out.shape[0] > 0:
        return np.int64(left_out[r])
    k = np.int64(0)
    for j in range(c):
        k += np.int64(votes[r, j])
    return k


@kernel
def likelihood(cells, grid, drop):
    """Multinomial probability of each cell's votes at each grid point (grid: (G, D + 1) chances
    of each category, the last the rest), as a sparse matrix (indptr, index, value): points whose
    probability is below `drop` times the cell's largest are left out (their share of any sum
    is below drop)."""
    n_cells, width = cells.shape
    dims = width - 1
    g = grid.shape[0]
    row = np.zeros(g)
    keep = np.zeros(g, np.bool_)
    log_grid = np.full((g, dims + 1), -np.inf)
    for j in range(g):
        for d in range(dims + 1):
            if grid[j, d] > 0.0:
                log_grid[j, d] = math.log(grid[j, d])
    indptr = np.zeros(n_cells + 1, np.int64)
    cap = n_cells * 8 + 64
    index = np.empty(cap, np.int64)
    value = np.empty(cap, np.float64)
    nnz = 0
    for c in range(n_cells):
        k = cells[c, 0]
        rest = k
        log_coef = math.lgamma(k + 1.0)
        for d in range(dims):
            log_coef -= math.lgamma(cells[c, 1 + d] + 1.0)
            rest -= cells[c, 1 + d]
        log_coef -= math.lgamma(rest + 1.0)
        top = 0.0
        for j in range(g):
            s = log_coef
            for d in range(dims + 1):
                v = cells[c, 1 + d] if d < dims else rest
                if v > 0:
                    s += v * log_grid[j, d]      # -inf where the grid point gives the category no chance
            row[j] = math.exp(s) if s > -np.inf else 0.0
            top = max(top, row[j])
        for j in range(g):
            keep[j] = row[j] > 0.0 and row[j] >= drop * top
            if keep[j]:
                if nnz == cap:
                    cap *= 2
                    index2 = np.empty(cap, np.int64)
                    value2 = np.empty(cap, np.float64)
                    index2[:nnz] = index[:nnz]
                    value2[:nnz] = value[:nnz]
                    index, value = index2, value2
                index[nnz] = j
                value[nnz] = row[j]
                nnz += 1
        indptr[c + 1] = nnz
    return indptr, index[:nnz].copy(), value[:nnz].copy()


@kernel
def _ems_map(lp, li, lv, w, sp, si, sv, pi, r, out):
    """One smoothed-EM step: out = S (pi * L'(w / L pi)); w the cell weights (summing to 1)."""
    g = pi.shape[0]
    r[:] = 0.0
    for c in range(lp.shape[0] - 1):
        f = 0.0
        for q in range(lp[c], lp[c + 1]):
            f += lv[q] * pi[li[q]]
        if f > 0.0:
            a = w[c] / f
            for q in range(lp[c], lp[c + 1]):
                r[li[q]] += lv[q] * a
    for j in range(g):
        r[j] *= pi[j]
    for i in range(g):
        s = 0.0
        for q in range(sp[i], sp[i + 1]):
            s += sv[q] * r[si[q]]
        out[i] = s


@kernel
def ems(lp, li, lv, counts, sp, si, sv, g, tol, max_iter):
    """Smoothed EM (Silverman et al. 1990) for the prior over the grid from a flat start, until no
    grid weight moves by more than tol, sped up by SQUAREM (Varadhan & Roland 2008, scheme S3;
    a step that would leave a weight negative falls back to two plain steps).
    Returns (pi, maps evaluated)."""
    total = 0.0
    for c in range(counts.shape[0]):
        total += counts[c]
    w = counts / total
    pi = np.full(g, 1.0 / g)
    r = np.zeros(g)
    p1 = np.zeros(g)
    p2 = np.zeros(g)
    nxt = np.zeros(g)
    evals = 0
    while evals < max_iter:
        _ems_map(lp, li, lv, w, sp, si, sv, pi, r, p1)
        _ems_map(lp, li, lv, w, sp, si, sv, p1, r, p2)
        evals += 2
        rr = 0.0
        vv = 0.0
        move = 0.0
        for j in range(g):
            d1 = p1[j] - pi[j]
            d2 = p2[j] - 2.0 * p1[j] + pi[j]
            rr += d1 * d1
            vv += d2 * d2
            move = max(move, abs(p2[j] - p1[j]))
        if move < tol or vv == 0.0:
            pi[:] = p2
            break
        alpha = -math.sqrt(rr / vv)
        if alpha > -1.0:
            alpha = -1.0
        ok = True
        for j in range(g):
            d1 = p1[j] - pi[j]
            d2 = p2[j] - 2.0 * p1[j] + pi[j]
            nxt[j] = pi[j] - 2.0 * alpha * d1 + alpha * alpha * d2
            if nxt[j] < 0.0:
                ok = False
        if not ok:
            nxt[:] = p2
        total = 0.0
        for j in range(g):
            total += nxt[j]
        for j in range(g):
            nxt[j] /= total
        # a plain step after the jump keeps the iteration stable
        _ems_map(lp, li, lv, w, sp, si, sv, nxt, r, pi)
        evals += 1
    return pi, evals


@kernel
def influence(lp, li, lv, counts, sp, si, sv, pi, gvals):
    """Influence of one more row in each cell on t = gvals' pi at the smoothed-EM fixed point.

    At the fixed point pi = S(pi * r(pi, w)); implicit differentiation gives
    dt/dw_c = u' S (pi * L_c) / f_c with (I - J)' u = g, J = S (diag(r) - diag(pi) L' diag(w/f^2) L).
    gvals: (G, B) one column per ensemble size. Returns (cells, B) influences, centred under w.
    """
    n_cells = lp.shape[0] - 1
    g = pi.shape[0]
    nb = gvals.shape[1]
    total = 0.0
    for c in range(n_cells):
        total += counts[c]
    f = np.zeros(n_cells)
    r = np.zeros(g)
    inner = np.zeros((g, g))
    for c in range(n_cells):
        s = 0.0
        for q in range(lp[c], lp[c + 1]):
            s += lv[q] * pi[li[q]]
        f[c] = s
        if s <= 0.0:
            continue
        wc = counts[c] / total
        for q in range(lp[c], lp[c + 1]):
            r[li[q]] += lv[q] * wc / s
        a = wc / (s * s)
        # inner -= diag(pi) L_c L_c' a
        for q in range(lp[c], lp[c + 1]):
            i = li[q]
            x = lv[q] * pi[i] * a
            for q2 in range(lp[c], lp[c + 1]):
                inner[i, li[q2]] -= x * lv[q2]
    for i in range(g):
        inner[i, i] += r[i]
    # a_mat = (I - S inner)'
    a_mat = np.zeros((g, g))
    for i in range(g):
        a_mat[i, i] = 1.0
    for i in range(g):
        for q in range(sp[i], sp[i + 1]):
            s = sv[q]
            row = si[q]
            for j in range(g):
                a_mat[j, i] -= s * inner[row, j]
    u = _solve(a_mat, gvals.copy())
    # v = S' u (S is symmetric in use, but keep the transpose honest)
    v = np.zeros((g, nb))
    for i in range(g):
        for q in range(sp[i], sp[i + 1]):
            j = si[q]
            s = sv[q]
            for b in range(nb):
                v[j, b] += s * u[i, b]
    psi = np.zeros((n_cells, nb))
    for c in range(n_cells):
        if f[c] <= 0.0:
            continue
        for q in range(lp[c], lp[c + 1]):
            j = li[q]
            x = lv[q] * pi[j] / f[c]
            for b in range(nb):
                psi[c, b] += x * v[j, b]
    for b in range(nb):
        mean = 0.0
        for c in range(n_cells):
            mean += counts[c] * psi[c, b]
        mean /= total
        for c in range(n_cells):
            psi[c, b] -= mean
    return psi


@kernel
def _solve(a, b):
    """Solve a x = b by Gaussian elimination with partial pivoting (a, b overwritten)."""
    n = a.shape[0]
    nb = b.shape[1]
    for col in range(n):
        piv = col
        for i in range(col + 1, n):
            if abs(a[i, col]) > abs(a[piv, col]):
                piv = i
        if piv != col:
            for j in range(n):
                t = a[col, j]
                a[col, j] = a[piv, j]
                a[piv, j] = t
            for j in range(nb):
                t = b[col, j]
                b[col, j] = b[piv, j]
                b[piv, j] = t
        d = a[col, col]
        if d == 0.0:
            continue
        for i in range(col + 1, n):
            m = a[i, col] / d
            if m != 0.0:
                for j in range(col, n):
                    a[i, j] -= m * a[col, j]
                for j in range(nb):
                    b[i, j] -= m * b[col, j]
    x = np.zeros((n, nb))
    for i in range(n - 1, -1, -1):
        for j in range(nb):
            s = b[i, j]
            for q in range(i + 1, n):
                s -= a[i, q] * x[q, j]
            x[i, j] = s / a[i, i] if a[i, i] != 0.0 else 0.0
    return x


@kernel
def regression_rows(value_sum, value_m2, left_out, y):
    """Per covered row: squared error of its OOB mean e, the spread of its OOB values s2
    (unbiased; NaN with one value) and k. Rows never out of bag are left out."""
    n = y.shape[0]
    m = 0
    for r in range(n):
        if left_out[r] > 0:
            m += 1
    e = np.empty(m)
    s2 = np.empty(m)
    k = np.empty(m)
    i = 0
    for r in range(n):
        kr = left_out[r]
        if kr == 0:
            continue
        d = value_sum[r] / kr - y[r]
        e[i] = d * d
        s2[i] = value_m2[r] / (kr - 1) if kr > 1 else np.nan
        k[i] = kr
        i += 1
    return e, s2, k
