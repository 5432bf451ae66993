"""numba kernels that send rows of binned codes down trees: one tree (route) or many (score_rows)."""
import numpy as np

from .jit import kernel

MISSING = 255


@kernel
def _child(code, node, left, right, threshold, is_cat, missing_left, cat_masks, mask_base):
    """The child of an internal node that a code goes to (indices local to the tree)."""
    if code == MISSING:
        go_left = missing_left[node] != 0
    elif is_cat[node]:
        word = cat_masks[mask_base + threshold[node], code >> 6]
        go_left = ((word >> np.uint64(code & 63)) & np.uint64(1)) != 0
    else:
        go_left = code <= threshold[node]
    return left[node] if go_left else right[node]


@kernel
def route(codes, rows, left, right, feature, threshold, is_cat, missing_left, cat_masks):
    """Leaf index (int32) reached by each of `rows` in one tree; codes feature-major (p, n)."""
    out = np.empty(rows.shape[0], np.int32)
    for i in range(rows.shape[0]):
        r = rows[i]
        node = 0
        while left[node] >= 0:
            code = np.int64(codes[feature[node], r])
            node = _child(code, node, left, right, threshold, is_cat, missing_left, cat_masks, 0)
        out[i] = node
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
    top = np.zeros(value.shape[0], np.int32)
    if want_votes:
        for v in range(value.shape[0]):
            b = 0
            for k in range(1, n_out):
                if value[v, k] > value[v, b]:
                    b = k
            top[v] = b
    chunk = 2048  # rows per pass over the trees: a tree's nodes stay in cache across the chunk
    for c0 in range(0, n, chunk):
        c1 = min(n, c0 + chunk)
        for t in range(node_offset.shape[0] - 1):
            base = node_offset[t]
            mbase = mask_offset[t]
            lt = left[base:node_offset[t + 1]]
            rt = right[base:node_offset[t + 1]]
            ft = feature[base:node_offset[t + 1]]
            tt = threshold[base:node_offset[t + 1]]
            ct = is_cat[base:node_offset[t + 1]]
            mt = missing_left[base:node_offset[t + 1]]
            for i in range(c0, c1):
                r = row_lo + i
                node = 0
                while lt[node] >= 0:
                    code = np.int64(codes[ft[node], r])
                    node = _child(code, node, lt, rt, tt, ct, mt, cat_masks, mbase)
                g = base + node
                for k in range(n_out):
                    sums[i, k] += value[g, k]
                if want_votes:
                    votes[i, top[g]] += 1
    return sums, votes
