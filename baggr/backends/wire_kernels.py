"""numba kernels of the cluster's wire format (dask_wire.py): OOB rows as a bit per table row, and class
shares as whole draw counts, both ways, in one pass each."""
import numpy as np

from baggr.jit import kernel
from baggr.learn.split_kernels import GINI, wimp_counts


@kernel
def rows_to_bits(rows, n):
    """uint8[ceil(n / 8)]: bit r (most significant first, as numpy's packbits) set for each r in rows."""
    bits = np.zeros((n + 7) // 8, np.uint8)
    for i in range(rows.shape[0]):
        r = rows[i]
        bits[r >> 3] |= np.uint8(128 >> (r & 7))
    return bits


@kernel
def bits_to_rows(bits, n):
    """int32: the rows whose bit is set, ascending (the inverse of rows_to_bits for ascending rows).
    Branch-free: every row is written and the count moves on by its bit (OOB rows are about a third of
    the table, at random: a branch per bit would be mispredicted half the time)."""
    ones = np.zeros(256, np.int64)
    for b in range(256):
        ones[b] = ones[b >> 1] + (b & 1)
    count = 0
    for j in range(bits.shape[0]):
        count += ones[bits[j]]
    rows = np.empty(count + 8, np.int32)
    k = 0
    for j in range(bits.shape[0]):
        b = np.int64(bits[j])
        base = 8 * j
        for t in range(8):
            rows[k] = base + t
            k += (b >> (7 - t)) & 1
    k = min(k, count)
    while k > 0 and rows[k - 1] >= n:     # bits past n (none from rows_to_bits)
        k -= 1
    return rows[:k]


@kernel
def shares_to_counts(value, weight):
    """(counts int32 [n, C], exact): each share times its node's weight, rounded, when every count over
    the weight gives back the share bit for bit; and whether each node's counts add up to its weight."""
    n, c = value.shape
    counts = np.empty((n, c), np.int32)
    scratch = np.empty(1, np.float64)
    bits = scratch.view(np.uint64)
    vbits = value.view(np.uint64)
    sums_to_weight = True
    for v in range(n):
        w = weight[v]
        if w <= 0:
            return counts, False, False
        wf = np.float64(w)
        total = 0
        for k in range(c):
            x = np.rint(value[v, k] * wf)
            if not (x >= 0.0 and x <= wf):
                return counts, False, False
            scratch[0] = x / wf
            if bits[0] != vbits[v, k]:
                return counts, False, False
            counts[v, k] = np.int32(x)
            total += counts[v, k]
        if total != w:
            sums_to_weight = False
    return counts, True, sums_to_weight


@kernel
def whole_counts(held, weight, c):
    """int32 [n, c]: the counts held, and (when they hold c - 1 columns) the last as the weight less the others."""
    n = held.shape[0]
    k_held = held.shape[1]
    counts = np.empty((n, c), np.int32)
    for v in range(n):
        rest = np.int64(weight[v])
        for k in range(k_held):
            counts[v, k] = held[v, k]
            rest -= held[v, k]
        if k_held < c:
            counts[v, c - 1] = np.int32(rest)
    return counts


@kernel
def counts_to_shares(counts, weight):
    """float64 [n, c]: each count over its node's weight (the learner's division)."""
    n, c = counts.shape
    value = np.empty((n, c), np.float64)
    for v in range(n):
        wf = np.float64(weight[v])
        for k in range(c):
            value[v, k] = np.float64(counts[v, k]) / wf
    return value


@kernel
def counts_to_impurity(counts, crit):
    """float64 [n]: each node's impurity from its class counts, as the learner computes it (the counts'
    weighted impurity over their float sum); crit: split_kernels.GINI or ENTROPY."""
    n, c = counts.shape
    out = np.empty(n, np.float64)
    cnt = np.empty(c, np.float64)
    for v in range(n):
        w = 0.0
        for k in range(c):
            cnt[k] = np.float64(counts[v, k])
            w += cnt[k]
        if crit == GINI and w > 0:     # wimp_counts' Gini, written out: a call per node costs more than it
            s = 0.0
            for k in range(c):
                s += cnt[k] * cnt[k]
            out[v] = (w - s / w) / w
        else:
            out[v] = wimp_counts(cnt, c, crit) / w
    return out


@kernel
def same_bits(a, b):
    """Whether two float64 arrays of one shape hold the same bits throughout."""
    x = a.reshape(-1).view(np.uint64)
    y = b.reshape(-1).view(np.uint64)
    if x.shape[0] != y.shape[0]:
        return False
    for i in range(x.shape[0]):
        if x[i] != y[i]:
            return False
    return True
