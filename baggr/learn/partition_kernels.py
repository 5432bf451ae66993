"""numba kernels that split a node's rows between its children: the side table of a split, the
in-bag rows (moved into the other buffer, left forward and right backward, so each child's rows stay
in ascending row order) and the out-of-bag positions (partitioned in place).

Each is a function of its own, not inlined into the tree kernel: there the row loop kept spilling
its pointers to the stack, at three times the instructions per row.
"""
import numpy as np

from baggr.jit import kernel
from baggr.learn.split_kernels import MISSING, inline


@kernel
def side_table(feat_cat, thr, mleft, mask, side):
    """side[c] = 1 if code c goes to the left child of a split, else 0: numeric, left when
    c <= thr; categorical, left when c is in the level set mask; missing (255), left if mleft."""
    for c in range(255):
        if feat_cat:
            # level codes are at most 254, so bit 255 of a mask is never set
            side[c] = np.uint8((mask[c >> 6] >> np.uint64(c & 63)) & np.uint64(1))
        else:
            side[c] = np.uint8(c <= thr)
    side[MISSING] = np.uint8(mleft)


@inline
def goes_left(c, side, table, thr, ml):
    """1 if code c goes to the left child: from the side table, or (numeric splits of regression
    trees, table 0) by comparing with the threshold."""
    if table:
        return np.int64(side[np.uint64(c)])
    return np.int64(c <= thr) | (np.int64(c == MISSING) & ml)


@kernel
def partition_rows(codes, f, side, lo, hi, idx, lw, src):
    """Partition positions lo..hi-1 of row src of idx and lw into the other row: left rows forward
    from lo, right rows backward from hi - 1; returns the first right position. f: the split feature.
    (Whole arrays and row numbers, not row views: each view and each array argument costs two
    atomic reference count updates, which small nodes notice.)

    Branch-free (the side a row takes is unpredictable): the slot is chosen by a select and only
    the counter of the row's side moves.
    """
    a = np.uint64(src)
    b = np.uint64(1 - src)
    ff = np.uint64(f)
    nl = lo
    nr = hi - 1
    for i in range(lo, hi):
        u = np.uint64(i)
        r = idx[a, u]
        g = np.int64(side[np.uint64(codes[ff, np.uint64(r)])])
        dst = np.uint64(nl if g else nr)
        idx[b, dst] = r
        lw[b, dst] = lw[a, u]
        nl += g
        nr -= 1 - g
    return nl


@kernel
def partition_rows_y(codes, f, side, table, thr, ml, lo, hi, idx, lw, yv, src):
    """partition_rows that also moves each row's target (regression); table, thr, ml: see goes_left."""
    a = np.uint64(src)
    b = np.uint64(1 - src)
    ff = np.uint64(f)
    nl = lo
    nr = hi - 1
    for i in range(lo, hi):
        u = np.uint64(i)
        r = idx[a, u]
        g = goes_left(codes[ff, np.uint64(r)], side, table, thr, ml)
        dst = np.uint64(nl if g else nr)
        idx[b, dst] = r
        lw[b, dst] = lw[a, u]
        yv[b, dst] = yv[a, u]
        nl += g
        nr -= 1 - g
    return nl


@kernel
def partition_oob(codes, f, side, table, thr, ml, lo, hi, opos, orow):
    """Partition the out-of-bag positions opos[lo:hi] (indices into the ascending OOB rows) and
    their rows orow[lo:hi] in place, left first; returns the first right position. Lomuto's scheme,
    branch-free: every row swaps with the first right one, so a right row only trades places
    inside the right part."""
    ff = np.uint64(f)
    nl = lo
    for i in range(lo, hi):
        u = np.uint64(i)
        e = opos[u]
        r = orow[u]
        g = goes_left(codes[ff, np.uint64(r)], side, table, thr, ml)
        w = np.uint64(nl)
        opos[u] = opos[w]
        orow[u] = orow[w]
        opos[w] = e
        orow[w] = r
        nl += g
    return nl
