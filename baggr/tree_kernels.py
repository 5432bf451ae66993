"""numba kernel that grows one tree on binned codes, weighted by a member's draw counts.

Depth-first with an explicit stack over an index of the distinct in-bag rows,
partitioned in place per node (a node is a contiguous range of that index).
The partition is stable, so each node's rows stay in ascending row order and
the gathered reads of codes[f, row] walk forward through memory.
"""
import numpy as np

from .jit import kernel
from .rng import below
from .split_kernels import (
    MISSING, build_classes, build_values, clear_classes, clear_values, level_keys_classes, level_keys_values,
    scan_classes, scan_values, sort_levels, wimp_counts,
)


@kernel
def _goes_left(code, feat_cat, thr, mleft, mask):
    """Whether a code goes to the left child of a split (mask: the left level set when categorical)."""
    if code == MISSING:
        return mleft != 0
    if feat_cat:
        return ((mask[code >> 6] >> np.uint64(code & 63)) & np.uint64(1)) != 0
    return code <= thr


@kernel
def _partition(codes_f, feat_cat, thr, mleft, mask, lo, hi, idx, wt, lab, yv, t_idx, t_wt, t_lab, t_yv):
    """Stable in-place partition of positions lo..hi-1 by the split; returns the first right position."""
    nl = lo
    nr = 0
    for i in range(lo, hi):
        r = idx[i]
        if _goes_left(np.int64(codes_f[r]), feat_cat, thr, mleft, mask):
            idx[nl] = r
            wt[nl] = wt[i]
            lab[nl] = lab[i]
            yv[nl] = yv[i]
            nl += 1
        else:
            t_idx[nr] = r
            t_wt[nr] = wt[i]
            t_lab[nr] = lab[i]
            t_yv[nr] = yv[i]
            nr += 1
    for t in range(nr):
        idx[nl + t] = t_idx[t]
        wt[nl + t] = t_wt[t]
        lab[nl + t] = t_lab[t]
        yv[nl + t] = t_yv[t]
    return nl


@kernel
def grow_kernel(codes, n_bins, is_cat, y_class, y_value, weights, regression, n_classes, crit,
                features_per_split, min_leaf, depth_limit, rng_state, exact_below):
    """Grow one tree; returns the untrimmed node arrays, n_nodes, n_masks and visits.

    regression: 0/1; crit: split_kernels.GINI/ENTROPY/VARIANCE; depth_limit < 0: none;
    nodes with fewer than exact_below distinct rows list their codes from a bit map (exact path).
    """
    p = codes.shape[0]
    n = codes.shape[1]
    n_out = 1 if regression else n_classes
    C = 1 if regression else n_classes

    d = 0
    for r in range(n):
        if weights[r] > 0:
            d += 1
    idx = np.empty(d, np.int32)
    wt = np.empty(d, np.int64)
    lab = np.zeros(d, np.int32)
    yv = np.zeros(d, np.float64)
    t = 0
    for r in range(n):
        if weights[r] > 0:
            idx[t] = r
            wt[t] = weights[r]
            if regression:
                yv[t] = y_value[r]
            else:
                lab[t] = y_class[r]
            t += 1

    max_nodes = 2 * d - 1
    left = np.full(max_nodes, -1, np.int32)
    right = np.full(max_nodes, -1, np.int32)
    feature = np.full(max_nodes, -1, np.int32)
    threshold = np.full(max_nodes, -1, np.int32)
    node_cat = np.zeros(max_nodes, np.uint8)
    missing_left = np.zeros(max_nodes, np.uint8)
    value = np.zeros((max_nodes, n_out), np.float64)
    n_rows = np.zeros(max_nodes, np.int32)
    weight = np.zeros(max_nodes, np.int32)
    impurity = np.zeros(max_nodes, np.float64)
    candidates = np.zeros(max_nodes, np.int32)
    any_cat = False
    for f in range(p):
        if is_cat[f]:
            any_cat = True
    cat_masks = np.zeros((d if any_cat else 0, 4), np.uint64)

    # scratch reused by every node; histograms are zeroed again bin by bin after each use
    t_idx = np.empty(d, np.int32)
    t_wt = np.empty(d, np.int64)
    t_lab = np.empty(d, np.int32)
    t_yv = np.empty(d, np.float64)
    ws = np.zeros(d if regression else 0, np.float64)
    hist = np.zeros(256 * C, np.int64)
    hist_w = np.zeros(256, np.int64)
    hist_s = np.zeros(256, np.float64)
    bits = np.zeros(4, np.uint64)
    pc = np.zeros(256, np.int32)
    miss = np.zeros(C, np.float64)
    tot = np.zeros(C, np.float64)
    lc = np.zeros(C, np.float64)
    cand_left = np.zeros(C, np.float64)
    best_left = np.zeros(C, np.float64)
    nodecnt = np.zeros(C, np.float64)
    lkeys = np.zeros(256, np.float64)
    order = np.zeros(256, np.int32)
    ident = np.arange(256).astype(np.int32)
    best_mask = np.zeros(4, np.uint64)
    perm = np.arange(p).astype(np.int32)

    # depth-first: at most one pending sibling per level, so depth + 2 <= d + 1 entries
    stack_node = np.zeros(d + 1, np.int32)
    stack_lo = np.zeros(d + 1, np.int32)
    stack_hi = np.zeros(d + 1, np.int32)
    stack_depth = np.zeros(d + 1, np.int32)
    stack_cnt = np.zeros((d + 1, C), np.float64)  # class counts of a pending node, known from its split
    stack_lo[0] = 0
    stack_hi[0] = d
    if not regression:
        for i in range(d):
            stack_cnt[0, lab[i]] += wt[i]
    sp = 1
    n_nodes = 1
    n_masks = 0
    visits = np.int64(0)

    while sp > 0:
        sp -= 1
        node = stack_node[sp]
        lo = stack_lo[sp]
        hi = stack_hi[sp]
        depth = stack_depth[sp]
        m = hi - lo

        # node statistics
        w = 0.0
        pure = False
        q = 0.0
        parent = 0.0
        key_class = 0
        if regression:
            s = 0.0
            ymin = yv[lo]
            ymax = yv[lo]
            iw = np.int64(0)
            for i in range(lo, hi):
                iw += wt[i]
                s += np.float64(wt[i]) * yv[i]
                if yv[i] < ymin:
                    ymin = yv[i]
                if yv[i] > ymax:
                    ymax = yv[i]
            w = np.float64(iw)
            mu = s / w
            for i in range(lo, hi):
                dv = yv[i] - mu
                ws[i] = np.float64(wt[i]) * dv
                q += ws[i] * dv
            value[node, 0] = mu
            impurity[node] = q / w
            pure = ymin == ymax
            parent = q
        else:
            kmax = 0
            for k in range(C):
                nodecnt[k] = stack_cnt[sp, k]
                w += nodecnt[k]
                if nodecnt[k] > nodecnt[kmax]:
                    kmax = k
            for k in range(C):
                value[node, k] = nodecnt[k] / w
            pure = nodecnt[kmax] == w
            parent = wimp_counts(nodecnt, 0, C, crit)
            impurity[node] = parent / w
            key_class = 1 if C == 2 else kmax
        n_rows[node] = m
        weight[node] = np.int32(w)

        if pure or w < 2 * min_leaf or depth == depth_limit:
            continue

        # split search over features drawn afresh at this node
        best = parent - (1e-12 * parent + 1e-15)
        best_f = -1
        best_ml = 0
        best_thr = 0
        scanned = 0
        evaluated = 0
        j = 0
        sparse = m < exact_below
        while evaluated < features_per_split and j < p:
            r = j + below(rng_state, p - j)
            f = perm[r]
            perm[r] = perm[j]
            perm[j] = f
            j += 1
            nb = n_bins[f]
            if nb <= 1:
                continue
            scanned += 1
            codes_f = codes[f]
            if regression:
                J = build_values(codes_f, idx, wt, ws, lo, hi, nb, sparse, hist_w, hist_s, bits, pc)
                has_miss = hist_w[MISSING] > 0
            else:
                J = build_classes(codes_f, idx, lab, wt, lo, hi, C, nb, sparse, hist, bits, pc)
                mo = MISSING * C
                has_miss = False
                for k in range(C):
                    if hist[mo + k] > 0:
                        has_miss = True
            if J + (1 if has_miss else 0) > 1:  # a feature constant in the node does not count
                evaluated += 1
                fc = is_cat[f] != 0
                if fc:
                    if regression:
                        level_keys_values(J, pc, hist_w, hist_s, lkeys)
                    else:
                        level_keys_classes(J, pc, hist, C, key_class, lkeys)
                    sort_levels(J, lkeys, order)
                    ordr = order
                else:
                    ordr = ident
                if regression:
                    sc, pos, ml = scan_values(J, pc, ordr, hist_w, hist_s, q, min_leaf, best)
                else:
                    sc, pos, ml = scan_classes(J, pc, ordr, hist, nodecnt, C, crit, min_leaf, best, lc, tot,
                                               miss, cand_left)
                if pos >= 0:
                    best = sc
                    best_f = f
                    best_ml = ml
                    for k in range(C):
                        best_left[k] = cand_left[k]
                    if fc:
                        for u in range(4):
                            best_mask[u] = 0
                        for u in range(pos + 1):
                            code = pc[order[u]]
                            best_mask[code >> 6] |= np.uint64(1) << np.uint64(code & 63)
                    else:
                        best_thr = pc[pos]  # threshold: the largest present code going left
            if regression:
                clear_values(J, pc, hist_w, hist_s)
            else:
                clear_classes(J, pc, C, hist)
        candidates[node] = scanned
        if best_f < 0:
            continue

        # split: record, partition, push the children (right first, so the left is grown first)
        visits += np.int64(m) * scanned
        fc = is_cat[best_f] != 0
        if fc:
            thr = n_masks
            for u in range(4):
                cat_masks[n_masks, u] = best_mask[u]
            n_masks += 1
        else:
            thr = best_thr
        feature[node] = best_f
        threshold[node] = thr
        node_cat[node] = 1 if fc else 0
        missing_left[node] = best_ml
        mid = _partition(codes[best_f], fc, thr, best_ml, best_mask, lo, hi, idx, wt, lab, yv,
                         t_idx, t_wt, t_lab, t_yv)
        lnode = n_nodes
        rnode = n_nodes + 1
        n_nodes += 2
        left[node] = lnode
        right[node] = rnode
        stack_node[sp] = rnode
        stack_lo[sp] = mid
        stack_hi[sp] = hi
        stack_depth[sp] = depth + 1
        for k in range(C):
            stack_cnt[sp, k] = nodecnt[k] - best_left[k]
        sp += 1
        stack_node[sp] = lnode
        stack_lo[sp] = lo
        stack_hi[sp] = mid
        stack_depth[sp] = depth + 1
        for k in range(C):
            stack_cnt[sp, k] = best_left[k]
        sp += 1

    return (left, right, feature, threshold, node_cat, missing_left, value, n_rows, weight,
            impurity, candidates, cat_masks, n_nodes, n_masks, visits)
