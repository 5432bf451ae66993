"""The scorer of format version 1 (baggr 909f52b), kept as the reference the compact scorer must match
bit for bit: route (one tree) and score_rows (a packed Forest). Not used by baggr itself."""
import numpy as np

from baggr.jit import kernel
from baggr.learn.split_kernels import inline

MISSING = 255


LANES = 8  # rows walked down a tree together, so that their memory reads overlap


@inline
def _leaves(codes, rows, i0, i1, base, mask_base, left, right, feature, threshold, is_cat, missing_left,
            cat_masks, lanes, leaf):
    """leaf[i - i0] = local leaf index reached by row rows[i] in the tree whose nodes start at base.

    Rows go down in groups of LANES: one row's walk is a chain of dependent reads, so walking
    several at once keeps several reads in flight. The step is written out here rather than in a
    helper: numba would count references to every array passed to it, at every step.
    """
    for g0 in range(i0, i1, LANES):
        cnt = min(LANES, i1 - g0)
        for k in range(cnt):
            lanes[k] = 0
        moving = True
        while moving:
            moving = False
            for k in range(cnt):
                v = base + lanes[k]
                lv = left[v]
                if lv >= 0:
                    code = np.int64(codes[feature[v], rows[g0 + k]])
                    if code == MISSING:
                        go_left = missing_left[v] != 0
                    elif is_cat[v]:
                        word = cat_masks[mask_base + threshold[v], code >> 6]
                        go_left = ((word >> np.uint64(code & 63)) & np.uint64(1)) != 0
                    else:
                        go_left = code <= threshold[v]
                    lanes[k] = lv if go_left else right[v]
                    moving = True
        for k in range(cnt):
            leaf[g0 + k - i0] = lanes[k]


@kernel
def route(codes, rows, left, right, feature, threshold, is_cat, missing_left, cat_masks):
    """Leaf index (int32) reached by each of `rows` in one tree; codes feature-major (p, n)."""
    out = np.empty(rows.shape[0], np.int32)
    lanes = np.zeros(LANES, np.int64)
    _leaves(codes, rows, 0, rows.shape[0], 0, 0, left, right, feature, threshold, is_cat, missing_left, cat_masks,
            lanes, out)
    return out


@kernel
def score_rows(codes, row_lo, row_hi, left, right, feature, threshold, is_cat, missing_left, cat_masks,
               value, node_offset, mask_offset, want_votes):
    """Sum of leaf values over all trees for rows row_lo..row_hi-1, and optionally hard votes.

    Node arrays of M trees are concatenated: tree t owns nodes node_offset[t]..node_offset[t+1]-1
    and mask rows mask_offset[t]..; child and mask indices are local to each tree.
    Returns (sums float64 [rows, n_out], votes int32 [rows, n_out] counting each tree's argmax
    leaf class, ties to the lowest class; shape (0, n_out) when want_votes is false).
    """
    n_out = value.shape[1]
    n = row_hi - row_lo
    sums = np.zeros((n, n_out), np.float64)
    votes = np.zeros((n if want_votes else 0, n_out), np.int32)
    top = np.zeros(value.shape[0] if want_votes else 0, np.int32)
    if want_votes:
        for v in range(value.shape[0]):
            b = 0
            for k in range(1, n_out):
                if value[v, k] > value[v, b]:
                    b = k
            top[v] = b
    chunk = 2048  # rows per pass over the trees: a tree's nodes stay in cache across the chunk
    rows = np.arange(row_lo, row_hi).astype(np.int64)
    leaf = np.empty(chunk, np.int64)
    lanes = np.zeros(LANES, np.int64)
    for c0 in range(0, n, chunk):
        c1 = min(n, c0 + chunk)
        for t in range(node_offset.shape[0] - 1):
            base = node_offset[t]
            _leaves(codes, rows, c0, c1, base, mask_offset[t], left, right, feature, threshold, is_cat,
                    missing_left, cat_masks, lanes, leaf)
            for i in range(c0, c1):
                g = base + leaf[i - c0]
                for k in range(n_out):
                    sums[i, k] += value[g, k]
                if want_votes:
                    votes[i, top[g]] += 1
    return sums, votes
