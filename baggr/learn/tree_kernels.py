"""numba kernels that grow one tree on binned codes, weighted by a member's draw counts, and send
the member's out-of-bag rows down it on the way.

Depth-first with an explicit stack over an index of the distinct in-bag rows (a node is a
contiguous range of that index). Each split moves the node's range into a second buffer, left
rows forward and right rows backward, so every node's rows stay in monotone row order and the
gathered reads of codes[f, row] walk through memory in one direction. The out-of-bag rows ride
along: each node also owns a range of their positions, partitioned in place by the same rule, so
a leaf writes its vote for its own out-of-bag rows and no separate routing pass is needed.

grow_kernel checks the draw, lays out the rows and the working arrays and packs the tree;
grow_nodes is the loop over the stack, each node through named steps:

    open_node       its statistics and record (a leaf until a split is recorded)
    search_split    batch after batch: draw_candidates (choose features), build_histograms,
                    scan_candidate (list the codes, order the levels, scan) or, for nodes of two
                    distinct rows, judge_two_rows; keep_best
    vote_leaf       a leaf: its out-of-bag rows get its vote
    record_split    the split in the node's record (and its level set)
    partition       the children's in-bag rows and out-of-bag positions (partition_kernels)
    push_children   right first, so the left is grown first

The steps are inlined into grow_nodes at numba's IR level (split_kernels.inline), and grow_nodes
works on borrowed views (baggr.jit.borrow) of arrays grow_kernel owns: an inlined step copies
every array it takes, and each copy would otherwise cost atomic reference count updates per node
wherever numba cannot prune them (the first split of this kernel into steps, without borrowing,
grew R3 trees 2.2 times as slowly in a paired run; see bench/README.md). The working arrays travel in named tuples (Rows, Records, Stack,
Search, Node), the settings in one (Rule).
"""
import hashlib
from collections import namedtuple
from pathlib import Path

import numpy as np

from baggr import jit
from baggr.jit import borrow, kernel
from baggr.learn import hist_kernels, partition_kernels, rng, split_kernels
from baggr.learn.hist_kernels import (
    build_classes, build_values, clear_classes, clear_values, list_classes, list_values,
)
from baggr.learn.partition_kernels import partition_oob, partition_rows, partition_rows_y, side_table
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

# The caller's working arrays, reused tree after tree (see grow_kernel).
Work = namedtuple("Work", ["idx", "lw", "yv", "ws", "ni", "nf", "stk", "stkc"])
# The settings of one tree. C: classes (1 for regression); shift, lmask: the bits of the class in a
# packed lw entry; nbatch: candidates whose histograms are built together.
Rule = namedtuple("Rule", ["regression", "C", "n_out", "crit", "features_per_split", "min_leaf", "depth_limit",
                           "exact_below", "keep", "oob_mode", "shift", "lmask", "nbatch"])
# The tree's rows: in-bag index and packed draw counts (two buffers; a node's rows sit in buffer
# depth % 2), targets (regression), w * (y - node mean) of the current node, out-of-bag positions
# (into the ascending out-of-bag rows) and rows, and what each out-of-bag row gets (oob_int or oob_val).
Rows = namedtuple("Rows", ["idx", "lw", "yv", "ws", "opos", "orow", "oob_int", "oob_val"])
# The node records (int32 columns L..FLAGS, float64 values and impurity) and the level sets.
Records = namedtuple("Records", ["ni", "nf", "cat_masks"])
# The pending nodes (columns S_NODE..S_OHI) and their class weights.
Stack = namedtuple("Stack", ["stk", "stkc"])
# Scratch of the split search, reused by every node; each histogram is zeroed again after use.
Search = namedtuple("Search", ["hist", "hist_w", "hist_s", "bits", "batch", "pc", "miss", "tot", "lc",
                               "cand_left", "lkeys", "work", "order", "perm"])
# The node under work: its class weights, its values (class shares or mean), the best split's left
# class weights and level set, and the side table of its split.
Node = namedtuple("Node", ["cnt", "val", "best_left", "best_mask", "side"])


# ---- the tree's rows (once per tree) ----------------------------------------------------------------

@inline
def count_draw(weights, n, limit):
    """(distinct in-bag rows, total draw, whether a count reaches limit: too heavy to pack)."""
    d = 0
    total = np.int64(0)
    heavy = False
    for r in range(n):
        wr = weights[r]
        if wr > 0:
            d += 1
            total += wr
            heavy |= wr >= limit
    return d, total, heavy


@inline
def load_rows(weights, n, y_class, y_value, regression, shift, idx, lw, yv, oob_rows, opos, orow):
    """The in-bag rows, ascending, with their packed draw counts (and targets) into buffer 0; the
    out-of-bag rows into oob_rows, their positions 0..k-1 into opos and their rows into orow."""
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
    for o in range(oob_rows.shape[0]):  # after the loop: when weights is lw[0], these entries may still be unread
        opos[o] = o
        orow[o] = oob_rows[o]


@inline
def fit_work(work, n, d, n_keep, n_out, C, regression):
    """The caller's working arrays, each replaced by a fresh one where too small for this tree (the
    caller's pool sizes them for its table)."""
    idx, lw, yv, ws, ni, nf, stk, stkc = work
    if idx.shape[1] < n:
        idx = np.empty((2, n), np.int32)
    if lw.shape[1] < n:
        lw = np.empty((2, n), np.int32)
    if regression and yv.shape[1] < d:
        yv = np.empty((2, d), np.float64)
    if regression and ws.shape[0] < d:
        ws = np.empty(d, np.float64)
    if ni.shape[0] < n_keep:
        ni = np.empty((n_keep, 8), np.int32)
    if nf.shape[0] < n_keep or nf.shape[1] < n_out + 1:
        nf = np.empty((n_keep, n_out + 1), np.float64)
    if stk.shape[0] < d + 1:
        stk = np.empty((d + 1, 6), np.int32)
    if stkc.shape[0] < d + 1 or stkc.shape[1] < C:
        stkc = np.empty((d + 1, C), np.float64)
    return idx, lw, yv, ws, ni, nf, stk, stkc


@inline
def node_scratch(p, C, n_out, regression, nbatch):
    """The working arrays of the split search and of the node under work, for one tree."""
    sx = Search(np.zeros((nbatch if not regression else 1, 256 * C), np.int32),
                np.zeros((nbatch if regression else 1, 256), np.int32),
                np.zeros((nbatch if regression else 1, 256), np.float64),
                np.zeros((nbatch, 4), np.uint64), np.zeros(nbatch, np.int64), np.zeros(256, np.int32),
                np.zeros(C, np.float64), np.zeros(C, np.float64), np.zeros(C, np.float64), np.zeros(C, np.float64),
                np.zeros(256, np.float64), np.empty((5, 256), np.float64), np.zeros(256, np.int32),
                np.arange(p).astype(np.int32))
    nd = Node(np.zeros(C, np.float64), np.zeros(n_out, np.float64), np.zeros(C, np.float64),
              np.zeros(4, np.uint64), np.zeros(256, np.uint8))
    return sx, nd


# ---- a node: the stack, its statistics and record ---------------------------------------------------

@inline
def push(stk, sp, node, lo, hi, depth, olo, ohi):
    """A pending node at stack slot sp: its in-bag positions lo..hi-1 and out-of-bag positions olo..ohi-1."""
    stk[sp, S_NODE] = node
    stk[sp, S_LO] = lo
    stk[sp, S_HI] = hi
    stk[sp, S_DEPTH] = depth
    stk[sp, S_OLO] = olo
    stk[sp, S_OHI] = ohi


@inline
def open_node(recs, rec, src, lo, hi, stkc, sp, rule, rows, nd):
    """Open a node's record (a leaf until a split is recorded) and fill in its statistics: values,
    impurity, distinct rows and draw weight. stkc[sp]: its class weights from the stack (classes).

    Regression also leaves w * (y - mean) of each row in rows.ws (the histograms' second sum).
    Returns (weight, pure, q: its SSE (regression; 0 for classes), parent: weight * impurity,
    key_class: the class whose share orders categorical levels).
    """
    ni, nf = recs.ni, recs.nf
    ni[rec, L] = -1
    ni[rec, R] = -1
    ni[rec, FEAT] = -1
    ni[rec, THR] = -1
    ni[rec, FLAGS] = 0
    ni[rec, CAND] = 0
    lw, yv, ws = rows.lw, rows.yv, rows.ws
    nodecnt, nodeval = nd.cnt, nd.val
    C, n_out = rule.C, rule.n_out
    w = 0.0
    pure = False
    q = 0.0
    parent = 0.0
    key_class = 0
    if rule.regression:
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
        parent = wimp_counts(nodecnt, C, rule.crit)
        nf[rec, n_out] = parent / w
        key_class = 1 if C == 2 else kmax
    for k in range(n_out):
        nf[rec, k] = nodeval[k]
    ni[rec, ROWS] = hi - lo
    ni[rec, WGT] = np.int32(w)
    return w, pure, q, parent, key_class


# ---- the split search -------------------------------------------------------------------------------

@inline
def draw_candidates(rng_state, n_bins, j, need, perm, batch):
    """Choose features: draw up to `need` more of those not yet drawn at this node (partial
    Fisher-Yates over perm[j:]), keeping in batch the ones that can split (more than one bin).
    Returns (candidates kept, features drawn so far)."""
    p = perm.shape[0]
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
    return nb_batch, j


@inline
def build_histograms(codes, rows, src, lo, hi, nb_batch, sparse, rule, sx):
    """The histograms of the candidates sx.batch[0:nb_batch] over the node's rows lo..hi-1 (sparse:
    also the bit maps of the codes seen)."""
    if rule.regression:
        build_values(codes, rows.idx, rows.lw, src, rows.ws, lo, hi, sx.batch, nb_batch, sparse, sx.hist_w,
                     sx.hist_s, sx.bits)
    else:
        build_classes(codes, rows.idx, rows.lw, src, rule.shift, lo, hi, rule.C, sx.batch, nb_batch, sparse,
                      sx.hist, sx.bits)


@inline
def scan_candidate(h, nb, fc, sparse, best, q, key_class, rule, sx, nodecnt):
    """Judge candidate h of the batch (nb bins; fc: categorical) from its histogram: list its codes,
    order its levels, find its best split scoring below best; then zero its histogram again.

    Returns (counted: 0 when the feature is constant in the node, score, pos, missing_left): pos is
    where the split ends in sx.pc (-1: it beats nothing), and sx.cand_left then holds the left
    child's class weights (classes).
    """
    hist, hist_w, hist_s, bits, pc = sx.hist, sx.hist_w, sx.hist_s, sx.bits, sx.pc
    C = rule.C
    regression = rule.regression
    counted = 0
    sc = best
    pos = -1
    ml = 0
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
        counted = 1
        if fc:  # scan the levels in order of their target share or mean
            if regression:
                level_keys_values(hist_w, hist_s, h, J, pc, sx.lkeys)
            else:
                level_keys_classes(hist, h, J, pc, C, key_class, sx.lkeys)
            sort_levels(J, sx.lkeys, sx.order, pc)
        if regression:
            sc, pos, ml = scan_values(hist_w, hist_s, h, J, pc, q, rule.min_leaf, best, sx.work)
        elif C == 2:
            ma = np.float64(hist[h, 2 * MISSING])
            mb = np.float64(hist[h, 2 * MISSING + 1])
            sc, pos, ml = scan_two(hist, h, J, pc, nodecnt[0] - ma, nodecnt[1] - mb, ma, mb,
                                   rule.crit, np.float64(rule.min_leaf), best, sx.work, sx.cand_left)
        else:
            sc, pos, ml = scan_classes(hist, h, J, pc, nodecnt, C, rule.crit, rule.min_leaf, best, sx.lc,
                                       sx.tot, sx.miss, sx.cand_left)
    # zeroed again for the next candidate (pc, read by keep_best, is left as it is)
    if regression:
        clear_values(hist_w, hist_s, h, J, pc, sparse)
    else:
        clear_classes(hist, h, J, pc, C, sparse)
    return counted, sc, pos, ml


@inline
def judge_two_rows(c0, c1, fc, best, q, two, rule, sx):
    """scan_candidate for a node of two distinct rows, from their codes c0, c1 alone (scan_two_rows;
    two: what it needs of the rows, see search_split). Same returns; the one code going left, if
    any, in sx.pc[0]."""
    wa, wb, ka, kb, sa, sb, na, nb = two
    counted, sc, code, ml, l0, l1 = scan_two_rows(c0, c1, fc, rule.regression, rule.crit, np.float64(rule.min_leaf),
                                                  best, q, wa, wb, ka, kb, sa, sb, na, nb)
    pos = -1
    if code >= 0:  # one code goes left
        pos = 0
        sx.pc[0] = code
        sx.cand_left[0] = l0
        if rule.C == 2:
            sx.cand_left[1] = l1
    return counted, sc, pos, ml


@inline
def keep_best(fc, pos, sx, nd, C, best_thr):
    """A candidate that beat the best so far becomes it: its left class weights into nd.best_left
    and its split: the level set sx.pc[0..pos] into nd.best_mask (categorical), or the threshold
    sx.pc[pos], the largest present code going left (numeric). Returns the threshold."""
    for k in range(C):
        nd.best_left[k] = sx.cand_left[k]
    if not fc:
        return sx.pc[pos]
    best_mask = nd.best_mask
    for u in range(4):
        best_mask[u] = 0
    for u in range(pos + 1):
        code = sx.pc[u]
        best_mask[code >> 6] |= np.uint64(1) << np.uint64(code & 63)
    return best_thr


@inline
def search_split(codes, n_bins, is_cat, rng_state, src, lo, hi, parent, q, key_class, rule, rows, sx, nd):
    """The best split of the node over features drawn afresh at it: (feature, -1 if none beats the
    node; threshold (numeric); missing_left; features scanned). The best's left class weights and
    level set are left in nd.best_left and nd.best_mask.

    Candidates are drawn in batches of those still needed, so the draws, the features scanned and
    their order are exactly those of drawing one at a time until features_per_split non-constant
    ones have been evaluated. Nodes below rule.exact_below distinct rows list their codes from a
    bit map (sparse); nodes of two distinct rows judge each candidate from the two rows' codes.
    """
    p = codes.shape[0]
    m = hi - lo
    regression = rule.regression
    best = parent - (1e-12 * parent + 1e-15)
    best_f = -1
    best_ml = 0
    best_thr = 0
    scanned = 0
    evaluated = 0
    j = 0
    sparse = m < rule.exact_below
    # two distinct rows: each candidate is judged from the two rows' codes (scan_two_rows)
    two = sparse and m == 2 and (regression or rule.C == 2)
    if two:
        ra = np.uint64(rows.idx[src, lo])
        rb = np.uint64(rows.idx[src, lo + 1])
        va = rows.lw[src, lo]
        vb = rows.lw[src, lo + 1]
        # draw counts, classes (packed in lw; regression: shift 0, so class 0), w * (y - mean)
        # (regression) and the node's weight per class (two classes)
        two_stats = (va >> rule.shift, vb >> rule.shift, va & rule.lmask, vb & rule.lmask,
                     rows.ws[lo] if regression else 0.0, rows.ws[lo + 1] if regression else 0.0,
                     0.0 if regression else nd.cnt[0], 0.0 if regression else nd.cnt[1])
    while evaluated < rule.features_per_split and j < p:
        need = min(rule.features_per_split - evaluated, rule.nbatch)
        nb_batch, j = draw_candidates(rng_state, n_bins, j, need, sx.perm, sx.batch)
        if not two:  # (two rows: no histogram)
            build_histograms(codes, rows, src, lo, hi, nb_batch, sparse, rule, sx)
        scanned += nb_batch
        for h in range(nb_batch):
            f = sx.batch[h]
            fc = is_cat[f] != 0
            if two:
                counted, sc, pos, ml = judge_two_rows(codes[np.uint64(f), ra], codes[np.uint64(f), rb], fc, best, q,
                                                      two_stats, rule, sx)
            else:
                counted, sc, pos, ml = scan_candidate(h, n_bins[f], fc, sparse, best, q, key_class, rule, sx, nd.cnt)
            evaluated += counted
            if pos >= 0:
                best = sc
                best_f = f
                best_ml = ml
                best_thr = keep_best(fc, pos, sx, nd, rule.C, best_thr)
    return best_f, best_thr, best_ml, scanned


# ---- leaves and splits ------------------------------------------------------------------------------

@inline
def vote_leaf(node, olo, ohi, rule, nodeval, rows):
    """A leaf's vote for its out-of-bag positions olo..ohi-1: its index, its most frequent class
    (ties to the lowest) or its values."""
    opos = rows.opos
    if rule.oob_mode == OOB_LEAF:
        for i in range(olo, ohi):
            rows.oob_int[opos[i]] = node
    elif rule.oob_mode == OOB_CLASS:
        top = 0
        for k in range(1, rule.n_out):
            if nodeval[k] > nodeval[top]:
                top = k
        for i in range(olo, ohi):
            rows.oob_int[opos[i]] = top
    else:
        for i in range(olo, ohi):
            for k in range(rule.n_out):
                rows.oob_val[opos[i], k] = nodeval[k]


@inline
def record_split(recs, rec, lnode, f, fc, thr_code, ml, keep, n_masks, best_mask):
    """The split in the node's record: children lnode and lnode + 1, feature, kind, missing side and
    threshold: numeric, the largest code going left; categorical, the row of recs.cat_masks that
    receives the level set. Returns (threshold, masks used)."""
    if fc:
        thr = n_masks
        if keep:
            for u in range(4):
                recs.cat_masks[n_masks, u] = best_mask[u]
            n_masks += 1
    else:
        thr = thr_code
    ni = recs.ni
    ni[rec, FEAT] = f
    ni[rec, THR] = thr
    ni[rec, FLAGS] = (1 if fc else 0) | (ml << 1)
    ni[rec, L] = lnode
    ni[rec, R] = lnode + 1
    return thr, n_masks


@inline
def partition(codes, f, fc, thr, ml, src, lo, hi, olo, ohi, rule, rows, side, best_mask):
    """Both children's rows: the in-bag rows into the other buffer and the out-of-bag positions in
    place, left first. Returns (mid, omid): where the right child's rows and positions start."""
    # regression trees split many small nodes, where filling the side table costs more than a
    # comparison per row; classes keep the table (a lookup is the faster partition on large nodes)
    table = fc or not rule.regression
    if table:
        side_table(fc, thr, ml, best_mask, side)
    if rule.regression:
        mid = partition_rows_y(codes, f, side, table, thr, ml, lo, hi, rows.idx, rows.lw, rows.yv, src)
    else:
        mid = partition_rows(codes, f, side, lo, hi, rows.idx, rows.lw, src)
    omid = partition_oob(codes, f, side, table, thr, ml, olo, ohi, rows.opos, rows.orow)
    return mid, omid


@inline
def push_children(stack, sp, lnode, lo, mid, hi, olo, omid, ohi, depth, C, nodecnt, best_left):
    """Push the right child, then the left (grown first), with their class weights; returns the new sp."""
    stk, stkc = stack.stk, stack.stkc
    push(stk, sp, lnode + 1, mid, hi, depth + 1, omid, ohi)
    for k in range(C):
        stkc[sp, k] = nodecnt[k] - best_left[k]
    sp += 1
    push(stk, sp, lnode, lo, mid, depth + 1, olo, omid)
    for k in range(C):
        stkc[sp, k] = best_left[k]
    return sp + 1


# ---- the tree ---------------------------------------------------------------------------------------

@kernel
def grow_nodes(codes, n_bins, is_cat, rng_state, rule, rows, recs, stack, sx, nd):
    """Grow the tree from the root waiting on the stack: every node through the steps above.
    Returns (nodes, level sets stored, visits).

    Every array here is one grow_kernel holds for the whole call, so they are borrowed: none is
    returned or kept.
    """
    codes, n_bins, is_cat, rng_state = borrow((codes, n_bins, is_cat, rng_state))
    rows, recs, stack, sx, nd = borrow(rows), borrow(recs), borrow(stack), borrow(sx), borrow(nd)
    stk = stack.stk
    keep = rule.keep
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
        src = depth & 1  # the buffer holding this node's rows
        rec = node if keep else 0  # estimate-only: every node's record goes to one slot
        w, pure, q, parent, key_class = open_node(recs, rec, src, lo, hi, stack.stkc, sp, rule, rows, nd)

        best_f = -1
        if not (pure or w < 2 * rule.min_leaf or depth == rule.depth_limit):
            best_f, best_thr, best_ml, scanned = search_split(codes, n_bins, is_cat, rng_state, src, lo, hi, parent,
                                                              q, key_class, rule, rows, sx, nd)
            recs.ni[rec, CAND] = scanned
            if best_f >= 0:
                visits += np.int64(hi - lo) * scanned
        if best_f < 0:
            vote_leaf(node, olo, ohi, rule, nd.val, rows)
            continue

        fc = is_cat[best_f] != 0
        thr, n_masks = record_split(recs, rec, n_nodes, best_f, fc, best_thr, best_ml, keep, n_masks, nd.best_mask)
        mid, omid = partition(codes, best_f, fc, thr, best_ml, src, lo, hi, olo, ohi, rule, rows, nd.side,
                              nd.best_mask)
        sp = push_children(stack, sp, n_nodes, lo, mid, hi, olo, omid, ohi, depth, rule.C, nd.cnt, nd.best_left)
        n_nodes += 2
    return n_nodes, n_masks, visits


@kernel
def pack_tree(ni, nf, cat_masks, kn, n_masks, n_out):
    """The node arrays of the first kn records, trimmed: (left, right, feature, threshold, is_cat,
    missing_left, value, n_rows, weight, impurity, candidates, cat_masks)."""
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
            impurity, candidates, masks)


@kernel
def grow_kernel(codes, n_bins, is_cat, y_class, y_value, weights, rng_state, regression, n_classes, crit,
                features_per_split, min_leaf, depth_limit, exact_below, keep, oob_mode, work):
    """Grow one tree and send its out-of-bag rows (weights == 0) down it on the way.

    regression: 0/1; crit: split_kernels.GINI/ENTROPY/VARIANCE; depth_limit < 0: none.
    Nodes with fewer than exact_below distinct rows list their codes from a bit map (exact path).
    keep: 0 skips the node arrays (estimate-only runs need only the out-of-bag votes).
    oob_mode: OOB_LEAF (int32 leaf per OOB row), OOB_CLASS (int32 hard-vote class: the leaf's
    most frequent class, ties to the lowest) or OOB_VALUE (float64 leaf values, [k, n_out]).
    work: a Work tuple of scratch arrays, reused across calls; any that is too small is replaced by
    a fresh array. idx, lw (int32, 2 x >= n): a node's in-bag rows and their packed draw counts sit
    in row depth % 2 of each; lw[0, d:n] and idx[1, d:n] hold the out-of-bag positions and rows.
    weights may be lw[0] (then the table's n int32 serve the draw, the rows' packed counts and the
    out-of-bag positions). ni, nf: the node records; stk, stkc: the stack and its nodes' class weights.

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

    d, total, heavy = count_draw(weights, n, limit)
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
    idx, lw, yv, ws, ni, nf, stk, stkc = fit_work(work, n, d, n_keep, n_out, C, regression)
    cat_masks = np.empty((d if (any_cat and keep) else 0, 4), np.uint64)
    if status != OK:
        return (np.empty(0, np.int32), np.empty(0, np.int32), np.empty(0, np.int32), np.empty(0, np.int32),
                np.empty(0, np.uint8), np.empty(0, np.uint8), np.empty((0, n_out), np.float64),
                np.empty(0, np.int32), np.empty(0, np.int32), np.empty(0, np.float64), np.empty(0, np.int32),
                cat_masks, 0, np.int64(0), oob_rows, oob_int, oob_val, status)
    opos = lw[0, d:n]  # free in both buffers: in-bag rows take [0, d)
    orow = idx[1, d:n]
    load_rows(weights, n, y_class, y_value, regression, shift, idx, lw, yv, oob_rows, opos, orow)

    nbatch = max(1, min(8, features_per_split, HIST_BYTES // (1024 * C)))
    rule = Rule(regression, C, n_out, crit, features_per_split, min_leaf, depth_limit, exact_below, keep, oob_mode,
                shift, (1 << shift) - 1, nbatch)
    sx, nd = node_scratch(p, C, n_out, regression, nbatch)

    # the root; depth-first: at most one pending sibling per level, so depth + 2 <= d + 1 entries
    push(stk, 0, 0, 0, d, 0, 0, k_oob)
    for k in range(C):
        stkc[0, k] = 0.0
    if not regression:
        for i in range(d):
            stkc[0, lw[0, i] & rule.lmask] += lw[0, i] >> shift
    n_nodes, n_masks, visits = grow_nodes(codes, n_bins, is_cat, rng_state, rule,
                                          Rows(idx, lw, yv, ws, opos, orow, oob_int, oob_val),
                                          Records(ni, nf, cat_masks), Stack(stk, stkc), sx, nd)
    kn = n_nodes if keep else 0
    return pack_tree(ni, nf, cat_masks, kn, n_masks, n_out) + (n_nodes, visits, oob_rows, oob_int, oob_val, status)


def _drop_stale_cache():
    """Empty the on-disk caches of grow_kernel and grow_nodes when a module they use changed.

    numba keys a kernel's cache on its own file's content only, and these two inline or link code
    from split_kernels, hist_kernels, partition_kernels, rng and baggr.jit: edit one of those and
    the cache would still serve the old kernel. A hash of those files kept beside the cache notices
    the edit.
    """
    caches = [getattr(fn, "_cache", None) for fn in (grow_kernel, grow_nodes)]
    paths = [getattr(c, "_cache_path", None) for c in caches]
    if None in paths:
        return
    digest = hashlib.sha256()
    for mod in (split_kernels, hist_kernels, partition_kernels, rng, jit):
        digest.update(Path(mod.__file__).read_bytes())
    stamp = Path(paths[0]) / "tree_kernels.helpers.sha256"
    try:
        if stamp.exists() and stamp.read_text() == digest.hexdigest():
            return
        for cache in caches:
            cache.flush()
        stamp.write_text(digest.hexdigest())
    except OSError:
        pass  # a read-only install: nothing is edited there either


_drop_stale_cache()
