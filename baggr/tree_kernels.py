"""numba kernel that grows one tree on binned codes, weighted by a member's draw counts.

Depth-first with an explicit stack over an index of the distinct in-bag rows (a node is a
contiguous range of that index). Each split moves the node's range into a second buffer, left
rows forward and right rows backward, so every node's rows stay in monotone row order and the
gathered reads of codes[f, row] walk through memory in one direction.
"""
import hashlib
from pathlib import Path

import numpy as np

from . import hist_kernels, split_kernels
from .hist_kernels import (
    build_classes, build_values, clear_classes, clear_values, list_classes, list_values,
)
from .jit import kernel
from .rng import below
from .split_kernels import (
    MISSING, inline, level_keys_classes, level_keys_values, scan_classes, scan_two, scan_values, sort_levels,
    wimp_counts,
)

HIST_BYTES = 32768  # histogram scratch per batch of candidate features (about an L1 cache)


@inline
def _goes_left(code, feat_cat, thr, mleft, mask):
    """1 if a code goes to the left child of a split, else 0 (mask: the left level set when categorical)."""
    miss = np.int64(code == MISSING) & np.int64(mleft)
    if feat_cat:
        # level codes are at most 254, so bit 255 of a mask is never set
        return np.int64((mask[code >> 6] >> np.uint64(code & 63)) & np.uint64(1)) | miss
    return np.int64(code <= thr) | miss


@inline
def _partition(codes, f, feat_cat, thr, mleft, mask, lo, hi, idx, lw, yv, src, regression):
    """Partition positions lo..hi-1 into the other buffer: left rows forward from lo, right rows
    backward from hi - 1; returns the first right position.

    Branch-free (the side a row takes is unpredictable): the slot is chosen by a select and only
    the counter of the row's side moves.
    """
    nl = lo
    nr = hi - 1
    uf = np.uint64(f)
    a = np.uint64(src)
    b = np.uint64(1 - src)
    for i in range(lo, hi):
        u = np.uint64(i)
        r = idx[a, u]
        g = _goes_left(np.int64(codes[uf, np.uint64(r)]), feat_cat, thr, mleft, mask)
        slot = np.uint64(nl if g else nr)
        idx[b, slot] = r
        lw[b, slot] = lw[a, u]
        if regression:
            yv[b, slot] = yv[a, u]
        nl += g
        nr -= 1 - g
    return nl


@kernel
def grow_kernel(codes, n_bins, is_cat, y_class, y_value, weights, regression, n_classes, crit,
                features_per_split, min_leaf, depth_limit, rng_state, exact_below):
    """Grow one tree; returns the untrimmed node arrays, n_nodes, n_masks and visits.

    regression: 0/1; crit: split_kernels.GINI/ENTROPY/VARIANCE; depth_limit < 0: none.
    Nodes with fewer than exact_below distinct rows list their codes from a bit map (exact path).
    """
    p = codes.shape[0]
    n = codes.shape[1]
    n_out = 1 if regression else n_classes
    C = 1 if regression else n_classes

    d = 0
    for r in range(n):
        if weights[r] > 0:
            d += 1
    # lw packs a row's draw count and class, (weight << shift) | class, so a visit reads one int32
    shift = 0
    while (1 << shift) < C:
        shift += 1
    # two buffers: a node at depth t holds its rows in buffer t % 2 and partitions into the other
    # (one 2-d array each rather than two arrays picked per node: numba counts references to
    # array variables, with atomic operations, every time one is reassigned)
    idx = np.empty((2, d), np.int32)
    lw = np.empty((2, d), np.int32)
    yv = np.empty((2, d if regression else 0), np.float64)
    t = 0
    for r in range(n):
        if weights[r] > 0:
            idx[0, t] = r
            if regression:
                lw[0, t] = weights[r]
                yv[0, t] = y_value[r]
            else:
                lw[0, t] = (weights[r] << shift) | y_class[r]
            t += 1

    # np.empty, filled node by node: pages past the last node are never touched
    max_nodes = 2 * d - 1
    left = np.empty(max_nodes, np.int32)
    right = np.empty(max_nodes, np.int32)
    feature = np.empty(max_nodes, np.int32)
    threshold = np.empty(max_nodes, np.int32)
    node_cat = np.empty(max_nodes, np.uint8)
    missing_left = np.empty(max_nodes, np.uint8)
    value = np.empty((max_nodes, n_out), np.float64)
    n_rows = np.empty(max_nodes, np.int32)
    weight = np.empty(max_nodes, np.int32)
    impurity = np.empty(max_nodes, np.float64)
    candidates = np.empty(max_nodes, np.int32)
    any_cat = False
    for f in range(p):
        if is_cat[f]:
            any_cat = True
    cat_masks = np.empty((d if any_cat else 0, 4), np.uint64)

    # scratch reused by every node; each histogram is zeroed again after use (its listed bins or all)
    nbatch = max(1, min(8, features_per_split, HIST_BYTES // (2048 * C)))
    ws = np.empty(d if regression else 0, np.float64)
    hist = np.zeros((nbatch if not regression else 1, 256 * C), np.int64)
    hist_w = np.zeros((nbatch if regression else 1, 256), np.int64)
    hist_s = np.zeros((nbatch if regression else 1, 256), np.float64)
    bits = np.zeros((nbatch, 4), np.uint64)
    batch = np.zeros(nbatch, np.int64)
    pc = np.zeros(256, np.int32)
    miss = np.zeros(C, np.float64)
    tot = np.zeros(C, np.float64)
    lc = np.zeros(C, np.float64)
    cand_left = np.zeros(C, np.float64)
    best_left = np.zeros(C, np.float64)
    nodecnt = np.zeros(C, np.float64)
    lkeys = np.zeros(256, np.float64)
    work = np.empty((5, 256), np.float64)
    order = np.zeros(256, np.int32)
    best_mask = np.zeros(4, np.uint64)
    perm = np.arange(p).astype(np.int32)

    # depth-first: at most one pending sibling per level, so depth + 2 <= d + 1 entries
    stack_node = np.empty(d + 1, np.int32)
    stack_lo = np.empty(d + 1, np.int32)
    stack_hi = np.empty(d + 1, np.int32)
    stack_depth = np.empty(d + 1, np.int32)
    stack_cnt = np.empty((d + 1, C), np.float64)  # class counts of a pending node, known from its split
    stack_node[0] = 0
    stack_lo[0] = 0
    stack_hi[0] = d
    stack_depth[0] = 0
    for k in range(C):
        stack_cnt[0, k] = 0.0
    if not regression:
        lmask = (1 << shift) - 1
        for i in range(d):
            stack_cnt[0, lw[0, i] & lmask] += lw[0, i] >> shift
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
        src = depth & 1  # the buffer holding this node's rows
        left[node] = -1
        right[node] = -1
        feature[node] = -1
        threshold[node] = -1
        node_cat[node] = 0
        missing_left[node] = 0
        candidates[node] = 0

        # node statistics
        w = 0.0
        pure = False
        q = 0.0
        parent = 0.0
        key_class = 0
        if regression:
            s = 0.0
            ymin = yv[src, lo]
            ymax = yv[src, lo]
            iw = np.int64(0)
            for i in range(lo, hi):
                iw += lw[src, i]
                s += np.float64(lw[src, i]) * yv[src, i]
                ymin = min(ymin, yv[src, i])
                ymax = max(ymax, yv[src, i])
            w = np.float64(iw)
            mu = s / w
            for i in range(lo, hi):
                dv = yv[src, i] - mu
                ws[i] = np.float64(lw[src, i]) * dv
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

        # Split search over features drawn afresh at this node (partial Fisher-Yates). Candidates
        # are drawn in batches of those still needed, so the draws, the features scanned and their
        # order are exactly those of drawing one at a time until features_per_split non-constant
        # ones have been evaluated.
        best = parent - (1e-12 * parent + 1e-15)
        best_f = -1
        best_ml = 0
        best_thr = 0
        scanned = 0
        evaluated = 0
        j = 0
        sparse = m < exact_below
        while evaluated < features_per_split and j < p:
            need = min(features_per_split - evaluated, nbatch)
            nb_batch = 0
            while nb_batch < need and j < p:
                r = j + below(rng_state, p - j)
                f = perm[r]
                perm[r] = perm[j]
                perm[j] = f
                j += 1
                if n_bins[f] > 1:  # a feature with one bin can never split: not scanned
                    batch[nb_batch] = f
                    nb_batch += 1
            if regression:
                build_values(codes, idx, lw, src, ws, lo, hi, batch, nb_batch, sparse, hist_w, hist_s, bits)
            else:
                build_classes(codes, idx, lw, src, shift, lo, hi, C, batch, nb_batch, sparse, hist, bits)
            scanned += nb_batch
            for h in range(nb_batch):
                f = batch[h]
                nb = n_bins[f]
                if regression:
                    J = list_values(hist_w, h, nb, sparse, bits, pc)
                    has_miss = hist_w[h, MISSING] > 0
                else:
                    J = list_classes(hist, h, nb, C, sparse, bits, pc)
                    has_miss = False
                    for k in range(C):
                        if hist[h, MISSING * C + k] > 0:
                            has_miss = True
                if J + (1 if has_miss else 0) > 1:  # a feature constant in the node does not count
                    evaluated += 1
                    fc = is_cat[f] != 0
                    if fc:  # scan the levels in order of their target share or mean
                        if regression:
                            level_keys_values(hist_w, hist_s, h, J, pc, lkeys)
                        else:
                            level_keys_classes(hist, h, J, pc, C, key_class, lkeys)
                        sort_levels(J, lkeys, order, pc)
                    if regression:
                        sc, pos, ml = scan_values(hist_w, hist_s, h, J, pc, q, min_leaf, best, work)
                    elif C == 2:
                        ma = np.float64(hist[h, 2 * MISSING])
                        mb = np.float64(hist[h, 2 * MISSING + 1])
                        sc, pos, ml = scan_two(hist, h, J, pc, nodecnt[0] - ma, nodecnt[1] - mb, ma, mb, crit,
                                               np.float64(min_leaf), best, work, cand_left)
                    else:
                        sc, pos, ml = scan_classes(hist, h, J, pc, nodecnt, C, crit, min_leaf, best, lc, tot, miss,
                                                   cand_left)
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
                                code = pc[u]
                                best_mask[code >> 6] |= np.uint64(1) << np.uint64(code & 63)
                        else:
                            best_thr = pc[pos]  # threshold: the largest present code going left
                if regression:
                    clear_values(hist_w, hist_s, h, J, pc, sparse)
                else:
                    clear_classes(hist, h, J, pc, C, sparse)
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
        mid = _partition(codes, best_f, fc, thr, best_ml, best_mask, lo, hi, idx, lw, yv, src, regression)
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


def _drop_stale_cache():
    """Empty grow_kernel's on-disk cache when an inlined helper module changed.

    numba keys the cache on this file's content only, and grow_kernel inlines code from
    split_kernels and hist_kernels: edit one of those and the cache would still serve the old
    kernel. A hash of both files kept beside the cache notices the edit.
    """
    cache = getattr(grow_kernel, "_cache", None)
    path = getattr(cache, "_cache_path", None)
    if path is None:
        return
    digest = hashlib.sha256()
    for mod in (split_kernels, hist_kernels):
        digest.update(Path(mod.__file__).read_bytes())
    stamp = Path(path) / "tree_kernels.helpers.sha256"
    try:
        if stamp.exists() and stamp.read_text() == digest.hexdigest():
            return
        cache.flush()
        stamp.write_text(digest.hexdigest())
    except OSError:
        pass  # a read-only install: nothing is edited there either


_drop_stale_cache()
