"""numba kernel that scores rows with the compact forest (compact_kernels.py has its layout)."""
import numpy as np

from baggr.jit import kernel
from baggr.learn.split_kernels import inline
from baggr.model.compact_kernels import leaf_number

MISSING = 255
M32 = np.uint64(0xFFFFFFFF)


@inline
def _step(blk, k, nodes, s0, last, p):
    """The slot lane k moves to from slot p of the tree at s0 (a leaf's slot moves to itself). The
    feature is masked to the block's power-of-two width: a leaf's record holds its number there."""
    r = nodes[s0 + p]
    flags = np.int64(r >> np.uint64(32))
    x = np.int64(blk[k, np.int64(r >> np.uint64(44)) & last])
    c = np.int64(r & M32)
    if x == MISSING:
        return c + 1 - ((flags >> 1) & 1)
    if flags & 1:
        word = nodes[s0 + c + 2 + (x >> 6)]
        return c + 1 - np.int64((word >> np.uint64(x & 63)) & np.uint64(1))
    return c + np.int64(x > ((flags >> 4) & 255))


@inline
def _step_plain(blk, k, nodes, s0, last, p):
    """_step for a block without missing codes and a forest without categorical splits."""
    r = nodes[s0 + p]
    return np.int64(r & M32) + np.int64(np.int64(blk[k, np.int64(r >> np.uint64(44)) & last])
                                        > (np.int64(r >> np.uint64(36)) & 255))


@inline
def _walk8(step, blk, g0, nodes, s0, last, leaf):
    """Rows g0..g0+7 of the block down the tree at s0 in lock step (8 independent chains of reads in
    flight) until none moves; their leaves' slots go to leaf[g0..g0+7]."""
    p0 = p1 = p2 = p3 = p4 = p5 = p6 = p7 = 0
    while True:
        n0 = step(blk, g0, nodes, s0, last, p0)
        n1 = step(blk, g0 + 1, nodes, s0, last, p1)
        n2 = step(blk, g0 + 2, nodes, s0, last, p2)
        n3 = step(blk, g0 + 3, nodes, s0, last, p3)
        n4 = step(blk, g0 + 4, nodes, s0, last, p4)
        n5 = step(blk, g0 + 5, nodes, s0, last, p5)
        n6 = step(blk, g0 + 6, nodes, s0, last, p6)
        n7 = step(blk, g0 + 7, nodes, s0, last, p7)
        moved = (n0 ^ p0) | (n1 ^ p1) | (n2 ^ p2) | (n3 ^ p3) | (n4 ^ p4) | (n5 ^ p5) | (n6 ^ p6) | (n7 ^ p7)
        p0, p1, p2, p3, p4, p5, p6, p7 = n0, n1, n2, n3, n4, n5, n6, n7
        if moved == 0:
            break
    leaf[g0], leaf[g0 + 1], leaf[g0 + 2], leaf[g0 + 3] = s0 + p0, s0 + p1, s0 + p2, s0 + p3
    leaf[g0 + 4], leaf[g0 + 5], leaf[g0 + 6], leaf[g0 + 7] = s0 + p4, s0 + p5, s0 + p6, s0 + p7


@inline
def _add_leaves(leaf, nb, i0, l0, nodes, leaves, shares, kind, sums, votes):
    """Add the leaves at slots leaf[:nb] (numbers counted from l0 in the leaf array) to rows i0..
    (apart from the walk: a branch on the kind inside it made the walk 2x slower)."""
    if kind == 0:
        for j in range(nb):
            votes[i0 + j, np.int64(leaves[l0 + leaf_number(nodes[leaf[j]])])] += 1
    elif kind == 1:
        for j in range(nb):
            sums[i0 + j, 0] += leaves[l0 + leaf_number(nodes[leaf[j]])]
    else:
        for j in range(nb):
            code = np.int64(leaves[l0 + leaf_number(nodes[leaf[j]])])
            if code < 0:
                sums[i0 + j, -1 - code] += 1.0
            else:
                for k in range(sums.shape[1]):
                    sums[i0 + j, k] += shares[code, k]


@kernel
def score_compact(codes, r0, r1, block, nodes, offset, leaf_offset, leaves, shares, kind, has_cat, sums, votes):
    """Add every tree's leaf for rows r0..r1-1 into sums (float64 [n, n_out]; VALUES, SHARES) or
    votes (int32 [n, n_out]; VOTES), trees in member order, so a row's figures do not depend on how
    the rows are split among threads. codes feature-major (p, n); has_cat: the forest has
    categorical splits.

    `block` rows at a time are copied row-major (a row's codes in one cache line) and cross every
    tree before the next block (the tree stays in cache), 8 rows at a time in lock step.
    """
    m = offset.shape[0] - 1
    p = codes.shape[0]
    width = 1
    while width < p:
        width *= 2
    last = width - 1
    blk = np.zeros((block + 8, width), np.uint8)
    leaf = np.zeros(block + 8, np.int64)
    for b0 in range(r0, r1, block):
        nb = min(r1, b0 + block) - b0
        missing = False
        for f in range(p):
            for j in range(nb):
                x = codes[f, b0 + j]
                blk[j, f] = x
                missing |= x == MISSING
        plain = not (missing or has_cat)
        for t in range(m):
            s0 = offset[t]
            for g0 in range(0, nb, 8):
                if plain:
                    _walk8(_step_plain, blk, g0, nodes, s0, last, leaf)
                else:
                    _walk8(_step, blk, g0, nodes, s0, last, leaf)
            _add_leaves(leaf, nb, b0 - r0, leaf_offset[t], nodes, leaves, shares, kind, sums, votes)
