"""numba kernel that scores rows with the compact forest (compact_kernels.py has its layout)."""
import numpy as np

from baggr.jit import kernel
from baggr.learn.split_kernels import inline

MISSING = 255
M32 = np.uint64(0xFFFFFFFF)


@inline
def _step(blk, k, nodes, s0, last, p, d):
    """One step of lane k down the tree at s0: (slot, done) after it. A finished lane (d) stays on
    its leaf; its payload is read as a record all the same, so the feature is masked to the block's
    (power of two) width and level-set words are only read for a live lane: no read leaves the arrays."""
    r = nodes[s0 + p]
    flags = np.int64(r >> np.uint64(32))
    x = np.int64(blk[k, np.int64(r >> np.uint64(44)) & last])
    c = np.int64(r & M32)
    if x == MISSING:
        g = 1 - ((flags >> 1) & 1)
    elif (flags & 1) and d == 0:
        word = nodes[s0 + c + 2 + (x >> 6)]
        g = 1 - np.int64((word >> np.uint64(x & 63)) & np.uint64(1))
    else:
        g = np.int64(x > ((flags >> 4) & 255))
    return (p if d else c + g), d | ((flags >> (2 + g)) & 1)


@inline
def _step_plain(blk, k, nodes, s0, last, p, d):
    """_step for a block without missing codes and a forest without categorical splits."""
    r = nodes[s0 + p]
    flags = np.int64(r >> np.uint64(32))
    x = np.int64(blk[k, np.int64(r >> np.uint64(44)) & last])
    g = np.int64(x > ((flags >> 4) & 255))
    return (p if d else np.int64(r & M32) + g), d | ((flags >> (2 + g)) & 1)


@inline
def _walk8(step, blk, g0, cnt, nodes, s0, last, rl, leaf):
    """Rows g0..g0+7 of the block (the first cnt of them real) down the tree at s0, in lock step:
    8 independent chains of reads in flight, and no branch on which have reached their leaf.
    Their leaves' slots go to leaf[g0..]."""
    p0 = p1 = p2 = p3 = p4 = p5 = p6 = p7 = 0
    d0 = rl
    d1 = rl | (cnt <= 1)
    d2 = rl | (cnt <= 2)
    d3 = rl | (cnt <= 3)
    d4 = rl | (cnt <= 4)
    d5 = rl | (cnt <= 5)
    d6 = rl | (cnt <= 6)
    d7 = rl | (cnt <= 7)
    while (d0 & d1 & d2 & d3 & d4 & d5 & d6 & d7) == 0:
        p0, d0 = step(blk, g0, nodes, s0, last, p0, d0)
        p1, d1 = step(blk, g0 + 1, nodes, s0, last, p1, d1)
        p2, d2 = step(blk, g0 + 2, nodes, s0, last, p2, d2)
        p3, d3 = step(blk, g0 + 3, nodes, s0, last, p3, d3)
        p4, d4 = step(blk, g0 + 4, nodes, s0, last, p4, d4)
        p5, d5 = step(blk, g0 + 5, nodes, s0, last, p5, d5)
        p6, d6 = step(blk, g0 + 6, nodes, s0, last, p6, d6)
        p7, d7 = step(blk, g0 + 7, nodes, s0, last, p7, d7)
    leaf[g0], leaf[g0 + 1], leaf[g0 + 2], leaf[g0 + 3] = s0 + p0, s0 + p1, s0 + p2, s0 + p3
    leaf[g0 + 4], leaf[g0 + 5], leaf[g0 + 6], leaf[g0 + 7] = s0 + p4, s0 + p5, s0 + p6, s0 + p7


@inline
def _add_leaves(leaf, nb, i0, nodes, values, shares, kind, sums, votes):
    """Add the leaves at slots leaf[:nb] to rows i0.. of the figures (apart from the walk: a
    branch on the kind inside it made the walk 2x slower)."""
    if kind == 0:
        for j in range(nb):
            votes[i0 + j, np.int64(nodes[leaf[j]])] += 1
    elif kind == 1:
        for j in range(nb):
            sums[i0 + j, 0] += values[leaf[j]]
    else:
        for j in range(nb):
            r = nodes[leaf[j]]
            if r >> np.uint64(63):
                sums[i0 + j, np.int64(r & np.uint64(0x7FFF_FFFF_FFFF_FFFF))] += 1.0
            else:
                for k in range(sums.shape[1]):
                    sums[i0 + j, k] += shares[np.int64(r), k]


@kernel
def score_compact(codes, r0, r1, block, nodes, values, tree_offset, root_leaf, shares, kind, has_cat, sums, votes):
    """Add every tree's leaf for rows r0..r1-1 into sums (float64 [n, n_out]; VALUES, SHARES) or
    votes (int32 [n, n_out]; VOTES), trees in member order, so a row's figures do not depend on how
    the rows are split among threads. nodes is the compact forest (compact_kernels), values the
    same memory as float64; codes feature-major (p, n); has_cat: the forest has categorical splits.

    `block` rows at a time are copied row-major (a row's codes in one cache line) and cross every
    tree before the next block (the tree stays in cache), 8 rows at a time in lock step.
    """
    m = tree_offset.shape[0] - 1
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
            s0 = tree_offset[t]
            rl = np.int64(root_leaf[t])
            for g0 in range(0, nb, 8):
                if plain:
                    _walk8(_step_plain, blk, g0, nb - g0, nodes, s0, last, rl, leaf)
                else:
                    _walk8(_step, blk, g0, nb - g0, nodes, s0, last, rl, leaf)
            _add_leaves(leaf, nb, b0 - r0, nodes, values, shares, kind, sums, votes)
