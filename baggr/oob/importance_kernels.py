"""numba kernels of the OOB permutation importance of one member (Breiman 2001, section 10).

For each feature f, the codes of f are permuted among the member's OOB rows and the rows sent
down the tree again; the rise in the member's OOB error is f's importance in that member.

Only nodes on f decide differently when f is permuted. So each row goes down its true path
once, and for each feature on the path only the path's nodes on that feature are asked again
(with the permuted code; they are known, so these are not a chain of dependent reads): where
one of them sends the row the other way, the row walks from there to a leaf; where none does,
the row keeps its leaf. Rows whose path never meets f keep their leaf unwalked.
"""
import numpy as np

from baggr.jit import kernel
from baggr.learn.rng import below
from baggr.learn.split_kernels import inline

MISSING = 255


@inline
def _child(v, code, left, right, threshold, is_cat, missing_left, cat_masks):
    """The child of internal node v that a row with `code` at v's feature goes to."""
    if code == MISSING:
        go_left = missing_left[v] != 0
    elif is_cat[v]:
        go_left = ((cat_masks[threshold[v], code >> 6] >> np.uint64(code & 63)) & np.uint64(1)) != 0
    else:
        go_left = code <= threshold[v]
    return left[v] if go_left else right[v]


@kernel
def permutation_rises(codes, rows, y_class, y_value, regression, n_classes, left, right, feature, threshold,
                      is_cat, missing_left, cat_masks, value, rng_state, delta, class_delta):
    """Add to delta[f] the change in the member's OOB loss (wrong rows, or squared error) when
    feature f's codes are permuted among its OOB rows `rows`, and to class_delta[f, c] the same
    over the rows of class c. rng_state (uint64[1]): the member's importance stream, advanced;
    the permutations are drawn feature by feature over the rows in ascending order, Fisher-Yates
    (Durstenfeld 1964).
    """
    p = codes.shape[0]
    n = rows.shape[0]
    n_nodes = left.shape[0]
    if n == 0 or n_nodes == 0:
        return
    # the prediction of every leaf: its most frequent class (ties to the lowest) or its mean
    top = np.zeros(n_nodes, np.int64)
    if not regression:
        for v in range(n_nodes):
            b = 0
            for c in range(1, value.shape[1]):
                if value[v, c] > value[v, b]:
                    b = c
            top[v] = b
    shuffled = np.empty((p, n), np.uint8)
    for f in range(p):
        for i in range(n):
            shuffled[f, i] = codes[f, rows[i]]
        for i in range(n - 1, 0, -1):
            j = below(rng_state, i + 1)
            t = shuffled[f, i]
            shuffled[f, i] = shuffled[f, j]
            shuffled[f, j] = t
    path = np.empty(n_nodes + 1, np.int64)
    after = np.empty(n_nodes + 1, np.int64)   # the next position on the path with the same feature (-1: none)
    first = np.full(p, -1, np.int64)          # the first position of each feature on the path
    row = np.empty(p, np.int64)               # the row's codes: walks read them here, not from
    for i in range(n):                        # columns far apart in memory
        r = rows[i]
        for f in range(p):
            row[f] = codes[f, r]
        d = 0
        v = 0
        while left[v] >= 0:
            path[d] = v
            d += 1
            v = _child(v, row[feature[v]], left, right, threshold, is_cat, missing_left, cat_masks)
        leaf0 = v
        path[d] = leaf0
        for j in range(d - 1, -1, -1):
            f = feature[path[j]]
            after[j] = first[f]
            first[f] = j
        if regression:
            e = value[leaf0, 0] - y_value[r]
            loss0 = e * e
        else:
            loss0 = 1.0 if top[leaf0] != y_class[r] else 0.0
        for j0 in range(d):
            f = feature[path[j0]]
            if first[f] != j0:
                continue
            # Nodes not on f send the row as before; so the walk with f permuted follows the path
            # until a node on f sends it the other way, and only then goes elsewhere.
            code_f = np.int64(shuffled[f, i])
            v = leaf0
            j = j0
            while j >= 0:
                nv = _child(path[j], code_f, left, right, threshold, is_cat, missing_left, cat_masks)
                if nv != path[j + 1]:
                    v = nv
                    break
                j = after[j]
            while left[v] >= 0:
                c = code_f if feature[v] == f else row[feature[v]]
                v = _child(v, c, left, right, threshold, is_cat, missing_left, cat_masks)
            if v == leaf0:
                continue
            if regression:
                e = value[v, 0] - y_value[r]
                change = e * e - loss0
            else:
                change = (1.0 if top[v] != y_class[r] else 0.0) - loss0
            delta[f] += change
            if not regression:
                class_delta[f, y_class[r]] += change
        for j in range(d):
            first[feature[path[j]]] = -1
