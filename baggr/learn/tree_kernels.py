"""numba kernel that grows one tree on binned codes, weighted by a member's draw counts, and sends
the member's out-of-bag rows down it on the way.

Depth-first with an explicit stack over an index of the distinct in-bag rows (a node is a
contiguous range of that index). Each split moves the node's range into a second buffer, left
rows forward and right rows backward, so every node's rows stay in monotone row order and the
gathered reads of codes[f, row] walk through memory in one direction. The out-of-bag rows ride
along: each node also owns a range of their positions, partitioned in place by the same rule, so
a leaf writes its vote for its own out-of-bag rows and no separate routing pass is needed.
"""
import hashlib
from pathlib import Path

import numpy as np

from baggr.learn import hist_kernels
from baggr.learn import split_kernels
from baggr.learn.hist_kernels import (
    build_classes, build_values, clear_classes, clear_values, list_classes, list_values,
)
from baggr.jit import kernel
from baggr.learn.rng import below
from baggr.learn.split_kernels import (
    MISSING, inline, level_keys_classes, level_keys_values, scan_classes, scan_two, scan_two_rows, scan_values,
    sort_levels, wimp_counts,
)

HIST_BYTES = 32768  # histogram scratch per batch of candidate features (about an L1 cache)
# columns of the node records kept while a tree grows (one int32 row and one float64 row per node)
L, R, FEAT, THR, ROWS, WGT, CAND, FLAGS = 0, 1, 2, 3, 4, 5, 6, 7
# columns of a pending node on the depth-first stack
S_NODE, S_LO, S_HI, S_DEPTH, S_OLO, S_OHI = 0, 1, 2, 3, 4, 5
# what the kernel writes for each out-of-bag row: its leaf, the leaf's hard-vote class, or the leaf's values
OOB_LEAF, OOB_CLASS, OOB_VALUE = 0, 1, 2
# status codes
OK, NO_ROWS, TOO_HEAVY = 0, 1, 2


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


# The partitions are functions of their own, not inlined into the tree kernel: there the row loop
# kept spilling its pointers to the stack, at three times the instructions per row.

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


@kernel
def grow_kernel(codes, n_bins, is_cat, y_class, y_value, weights, regression, n_classes, crit,
                features_per_split, min_leaf, depth_limit, rng_state, exact_below, keep, oob_mode,
                idx, lw, yv, ws, ni, nf, stk, stkc):
    """Grow one tree and send its out-of-bag rows (weights == 0) down it on the way.

    regression: 0/1; crit: split_kernels.GINI/ENTROPY/VARIANCE; depth_limit < 0: none.
    Nodes with fewer than exact_below distinct rows list their codes from a bit map (exact path).
    keep: 0 skips the node arrays (estimate-only runs need only the out-of-bag votes).
    oob_mode: OOB_LEAF (int32 leaf per OOB row), OOB_CLASS (int32 hard-vote class: the leaf's
    most frequent class, ties to the lowest) or OOB_VALUE (float64 leaf values, [k, n_out]).
    idx .. stkc: scratch, reused across calls; any that is too small is replaced by a fresh array.
    idx, lw (int32, 2 x >= n): a node's in-bag rows and their packed draw counts sit in row
    depth % 2 of each; lw[0, d:n] and idx[1, d:n] hold the out-of-bag positions and rows. weights may be lw[0]
    (then the table's n int32 serve the draw, the rows' packed counts and the out-of-bag positions).

    Returns (left, right, feature, threshold, is_cat, missing_left, value, n_rows, weight,
    impurity, candidates, cat_masks) trimmed (empty when keep is 0), n_nodes, visits, oob_rows
    (ascending), oob_int, oob_val, status (OK, NO_ROWS, TOO_HEAVY: a draw count too large to
    pack with the class).
    """
    p = codes.shape[0]
    n = codes.shape[1]
    n_out = 1 if regression else n_classes
    C = 1 if regression else n_classes
    # lw packs a row's draw count and class, (weight << shift) | class, so a visit reads one int32
    shift = 0
    while (1 << shift) < C:
        shift += 1
    limit = (1 << (31 - shift)) if not regression else (1 << 31) - 1

    d = 0
    total = np.int64(0)
    heavy = False
    for r in range(n):
        wr = weights[r]
        if wr > 0:
            d += 1
            total += wr
            heavy |= wr >= limit
    k_oob = n - d
    oob_rows = np.empty(k_oob, np.int32)
    oob_int = np.empty(k_oob if oob_mode != OOB_VALUE else 0, np.int32)
    oob_val = np.empty((k_oob if oob_mode == OOB_VALUE else 0, n_out), np.float64)
    status = OK
    if d == 0:
        status = NO_ROWS
    elif heavy or total >= (1 << 31):
        status = TOO_HEAVY
    max_nodes = max(2 * d - 1, 1)
    any_cat = False
    for f in range(p):
        if is_cat[f]:
            any_cat = True
    n_keep = max_nodes if keep else 1
    # scratch too small for this call: replaced (the caller's pool sizes it for its table)
    if idx.shape[1] < n:
        idx = np.empty((2, n), np.int32)
    if lw.shape[1] < n:
        lw = np.empty((2, n), np.int32)
    if regression and yv.shape[1] < d:
        yv = np.empty((2, d), np.float64)
    if regression and ws.shape[0] < d:
        ws = np.empty(d, np.float64)
    opos = lw[0, d:n]  # free in both buffers: in-bag rows take [0, d)
    orow = idx[1, d:n]
    if ni.shape[0] < n_keep:
        ni = np.empty((n_keep, 8), np.int32)
    if nf.shape[0] < n_keep or nf.shape[1] < n_out + 1:
        nf = np.empty((n_keep, n_out + 1), np.float64)
    if stk.shape[0] < d + 1:
        stk = np.empty((d + 1, 6), np.int32)
    if stkc.shape[0] < d + 1 or stkc.shape[1] < C:
        stkc = np.empty((d + 1, C), np.float64)
    cat_masks = np.empty((d if (any_cat and keep) else 0, 4), np.uint64)
    if status != OK:
        return (np.empty(0, np.int32), np.empty(0, np.int32), np.empty(0, np.int32), np.empty(0, np.int32),
                np.empty(0, np.uint8), np.empty(0, np.uint8), np.empty((0, n_out), np.float64),
                np.empty(0, np.int32), np.empty(0, np.int32), np.empty(0, np.float64), np.empty(0, np.int32),
                cat_masks, 0, np.int64(0), oob_rows, oob_int, oob_val, status)

    t = 0
    o = 0
    for r in range(n):
        wr = weights[r]
        if wr > 0:
            idx[0, t] = r  # t <= r: when weights is lw[0], entry r is read before it is written
            if regression:
                lw[0, t] = wr
                yv[0, t] = y_value[r]
            else:
                lw[0, t] = (wr << shift) | y_class[r]
            t += 1
        else:
            oob_rows[o] = r
            o += 1
    for o in range(k_oob):  # after the loop: when weights is lw[0], these entries may still be unread
        opos[o] = o
        orow[o] = oob_rows[o]

    # scratch reused by every node; each histogram is zeroed again after use (its listed bins or all)
    nbatch = max(1, min(8, features_per_split, HIST_BYTES // (1024 * C)))
    hist = np.zeros((nbatch if not regression else 1, 256 * C), np.int32)
    hist_w = np.zeros((nbatch if regression else 1, 256), np.int32)
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
    nodeval = np.zeros(n_out, np.float64)
    lkeys = np.zeros(256, np.float64)
    work = np.empty((5, 256), np.float64)
    order = np.zeros(256, np.int32)
    best_mask = np.zeros(4, np.uint64)
    side = np.zeros(256, np.uint8)
    perm = np.arange(p).astype(np.int32)

    # depth-first: at most one pending sibling per level, so depth + 2 <= d + 1 entries
    stk[0, S_NODE] = 0
    stk[0, S_LO] = 0
    stk[0, S_HI] = d
    stk[0, S_DEPTH] = 0
    stk[0, S_OLO] = 0
    stk[0, S_OHI] = k_oob
    for k in range(C):
        stkc[0, k] = 0.0
    lmask = (1 << shift) - 1
    if not regression:
        for i in range(d):
            stkc[0, lw[0, i] & lmask] += lw[0, i] >> shift
    sp = 1
    n_nodes = 1
    n_masks = 0
    visits = np.int64(0)

    while sp > 0:
        sp -= 1
        node = stk[sp, S_NODE]
        lo = stk[sp, S_LO]
        hi = stk[sp, S_HI]
        depth = stk[sp, S_DEPTH]
        olo = stk[sp, S_OLO]
        ohi = stk[sp, S_OHI]
        m = hi - lo
        src = depth & 1  # the buffer holding this node's rows
        rec = node if keep else 0  # estimate-only: every node's record goes to one slot
        ni[rec, L] = -1
        ni[rec, R] = -1
        ni[rec, FEAT] = -1
        ni[rec, THR] = -1
        ni[rec, FLAGS] = 0
        ni[rec, CAND] = 0

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
            nodeval[0] = mu
            nf[rec, n_out] = q / w
            pure = ymin == ymax
            parent = q
        else:
            kmax = 0
            for k in range(C):
                nodecnt[k] = stkc[sp, k]
                w += nodecnt[k]
                if nodecnt[k] > nodecnt[kmax]:
                    kmax = k
            for k in range(C):
                nodeval[k] = nodecnt[k] / w
            pure = nodecnt[kmax] == w
            parent = wimp_counts(nodecnt, C, crit)
            nf[rec, n_out] = parent / w
            key_class = 1 if C == 2 else kmax
        for k in range(n_out):
            nf[rec, k] = nodeval[k]
        ni[rec, ROWS] = m
        ni[rec, WGT] = np.int32(w)

        best_f = -1
        if not (pure or w < 2 * min_leaf or depth == depth_limit):
            # Split search over features drawn afresh at this node (partial Fisher-Yates). Candidates
            # are drawn in batches of those still needed, so the draws, the features scanned and their
            # order are exactly those of drawing one at a time until features_per_split non-constant
            # ones have been evaluated.
            best = parent - (1e-12 * parent + 1e-15)
            best_ml = 0
            best_thr = 0
            scanned = 0
            evaluated = 0
            j = 0
            sparse = m < exact_below
            # two distinct rows: each candidate is judged from the two rows' codes (scan_two_rows)
            two = sparse and m == 2 and (regression or C == 2)
            if two:
                ra = np.uint64(idx[src, lo])
                rb = np.uint64(idx[src, lo + 1])
                va = lw[src, lo]
                vb = lw[src, lo + 1]
                # draw count and class from the packed lw (regression: shift 0, so count and class 0)
                wa = va >> shift
                wb = vb >> shift
                ka = va & lmask
                kb = vb & lmask
                sa = ws[lo] if regression else 0.0
                sb = ws[lo + 1] if regression else 0.0
                na = 0.0 if regression else nodecnt[0]
                nb2 = 0.0 if regression else nodecnt[1]
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
                if not two:  # (two rows: no histogram)
                    if regression:
                        build_values(codes, idx, lw, src, ws, lo, hi, batch, nb_batch, sparse, hist_w, hist_s, bits)
                    else:
                        build_classes(codes, idx, lw, src, shift, lo, hi, C, batch, nb_batch, sparse, hist, bits)
                scanned += nb_batch
                for h in range(nb_batch):
                    f = batch[h]
                    nb = n_bins[f]
                    fc = is_cat[f] != 0
                    sc = best
                    pos = -1  # where the candidate's split ends in pc (-1: it beats nothing)
                    ml = 0
                    if two:
                        cnt, sc, code, ml, l0, l1 = scan_two_rows(
                            codes[np.uint64(f), ra], codes[np.uint64(f), rb], fc, regression, crit,
                            np.float64(min_leaf), best, q, wa, wb, ka, kb, sa, sb, na, nb2)
                        evaluated += cnt
                        if code >= 0:  # one code goes left
                            pos = 0
                            pc[0] = code
                            cand_left[0] = l0
                            if C == 2:
                                cand_left[1] = l1
                    else:
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
                                sc, pos, ml = scan_two(hist, h, J, pc, nodecnt[0] - ma, nodecnt[1] - mb, ma, mb,
                                                       crit, np.float64(min_leaf), best, work, cand_left)
                            else:
                                sc, pos, ml = scan_classes(hist, h, J, pc, nodecnt, C, crit, min_leaf, best, lc,
                                                           tot, miss, cand_left)
                        # zeroed again for the next candidate (pc, read below, is left as it is)
                        if regression:
                            clear_values(hist_w, hist_s, h, J, pc, sparse)
                        else:
                            clear_classes(hist, h, J, pc, C, sparse)
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
            ni[rec, CAND] = scanned
            if best_f >= 0:
                visits += np.int64(m) * scanned

        if best_f < 0:
            # a leaf: its out-of-bag rows get its vote
            if oob_mode == OOB_LEAF:
                for i in range(olo, ohi):
                    oob_int[opos[i]] = node
            elif oob_mode == OOB_CLASS:
                top = 0
                for k in range(1, n_out):
                    if nodeval[k] > nodeval[top]:
                        top = k
                for i in range(olo, ohi):
                    oob_int[opos[i]] = top
            else:
                for i in range(olo, ohi):
                    for k in range(n_out):
                        oob_val[opos[i], k] = nodeval[k]
            continue

        # split: record, partition, push the children (right first, so the left is grown first)
        fc = is_cat[best_f] != 0
        if fc:
            thr = n_masks
            if keep:
                for u in range(4):
                    cat_masks[n_masks, u] = best_mask[u]
                n_masks += 1
        else:
            thr = best_thr
        ni[rec, FEAT] = best_f
        ni[rec, THR] = thr
        ni[rec, FLAGS] = (1 if fc else 0) | (best_ml << 1)
        # regression trees split many small nodes, where filling the side table costs more than a
        # comparison per row; classes keep the table (a lookup is the faster partition on large nodes)
        table = fc or not regression
        if table:
            side_table(fc, thr, best_ml, best_mask, side)
        if regression:
            mid = partition_rows_y(codes, best_f, side, table, thr, best_ml, lo, hi, idx, lw, yv, src)
        else:
            mid = partition_rows(codes, best_f, side, lo, hi, idx, lw, src)
        omid = partition_oob(codes, best_f, side, table, thr, best_ml, olo, ohi, opos, orow)
        lnode = n_nodes
        rnode = n_nodes + 1
        n_nodes += 2
        ni[rec, L] = lnode
        ni[rec, R] = rnode
        stk[sp, S_NODE] = rnode
        stk[sp, S_LO] = mid
        stk[sp, S_HI] = hi
        stk[sp, S_DEPTH] = depth + 1
        stk[sp, S_OLO] = omid
        stk[sp, S_OHI] = ohi
        for k in range(C):
            stkc[sp, k] = nodecnt[k] - best_left[k]
        sp += 1
        stk[sp, S_NODE] = lnode
        stk[sp, S_LO] = lo
        stk[sp, S_HI] = mid
        stk[sp, S_DEPTH] = depth + 1
        stk[sp, S_OLO] = olo
        stk[sp, S_OHI] = omid
        for k in range(C):
            stkc[sp, k] = best_left[k]
        sp += 1

    kn = n_nodes if keep else 0
    left = np.empty(kn, np.int32)
    right = np.empty(kn, np.int32)
    feature = np.empty(kn, np.int32)
    threshold = np.empty(kn, np.int32)
    node_cat = np.empty(kn, np.uint8)
    missing_left = np.empty(kn, np.uint8)
    value = np.empty((kn, n_out), np.float64)
    n_rows = np.empty(kn, np.int32)
    weight = np.empty(kn, np.int32)
    impurity = np.empty(kn, np.float64)
    candidates = np.empty(kn, np.int32)
    for v in range(kn):
        left[v] = ni[v, L]
        right[v] = ni[v, R]
        feature[v] = ni[v, FEAT]
        threshold[v] = ni[v, THR]
        node_cat[v] = ni[v, FLAGS] & 1
        missing_left[v] = ni[v, FLAGS] >> 1
        for k in range(n_out):
            value[v, k] = nf[v, k]
        n_rows[v] = ni[v, ROWS]
        weight[v] = ni[v, WGT]
        impurity[v] = nf[v, n_out]
        candidates[v] = ni[v, CAND]
    masks = cat_masks[:n_masks].copy()
    return (left, right, feature, threshold, node_cat, missing_left, value, n_rows, weight,
            impurity, candidates, masks, n_nodes, visits, oob_rows, oob_int, oob_val, status)


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
