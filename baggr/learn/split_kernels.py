"""numba kernels of the split search at one node: impurities and the best prefix split of one
candidate feature, read from its histogram hist[q] (see hist_kernels) at the present codes pc[0:J].

Scores are the weighted child impurity w_L * imp(L) + w_R * imp(R): Gini (1 - sum p_k^2),
entropy in bits (-sum p_k log2 p_k) or, for regression, the weighted sum of squared deviations,
computed as Q - (S_L^2 / W_L + S_R^2 / W_R) with y centred at the node mean (Q is the node's
SSE, fixed at the node). Ties keep the first split found.

Candidate splits of one feature, in scan order: left = the first j + 1 present codes, for
j = 0..J-2, each with the node's in-bag missing rows (code 255) first on the left, then on the
right; then "every present code left, missing alone right". Without in-bag missing rows, missing
values met later go to the heavier child. Numeric codes are scanned in code order. Categorical
levels are scanned by their in-bag share of class 1 (two classes) or their mean (regression),
which finds the best of all level subsets (Breiman et al. 1984, sec. 9.4; Fisher 1958); with
more classes, by their share of the node's most frequent class, a heuristic that can miss the
best subset. The orders use the node's in-bag rows only.
"""
import numba
import numpy as np

from baggr.jit import KERNEL, kernel

# Helpers called once per (node, feature) are inlined into the tree kernel at numba's IR level:
# as separate functions each call increfs and decrefs every array argument (two atomic operations
# per array), which cost more than the work of a small node. (numba's cache of the tree kernels
# keys on tree_kernels.py alone; tree_kernels drops it when this file or another it uses changes.)
inline = numba.njit(inline="always", **KERNEL)

GINI = 0
ENTROPY = 1
VARIANCE = 2
MISSING = 255


@kernel
def wimp_counts(cnt, n_classes, crit):
    """w * impurity of the class counts cnt[0:n_classes] (Gini or entropy in bits)."""
    w = 0.0
    for k in range(n_classes):
        w += cnt[k]
    if w <= 0:
        return 0.0
    s = 0.0
    if crit == GINI:
        for k in range(n_classes):
            c = np.float64(cnt[k])
            s += c * c
        return w - s / w
    for k in range(n_classes):
        c = np.float64(cnt[k])
        if c > 0:
            s += c * np.log2(w / c)
    return s


@kernel
def impurity_counts(cnt, crit):
    """Impurity of a class count vector: Gini (1 - sum p^2) or entropy in bits."""
    n = cnt.shape[0]
    w = 0.0
    for k in range(n):
        w += cnt[k]
    if w <= 0:
        return 0.0
    return wimp_counts(cnt, n, crit) / w


@kernel
def _ent_pair(a, b, c, d):
    """w * entropy (bits) of two class counts (a, b) plus that of (c, d) (floats holding whole
    numbers). One function, not inlined: four copies of it cost seconds of compile time."""
    s = 0.0
    w = a + b
    if a > 0:
        s += a * np.log2(w / a)
    if b > 0:
        s += b * np.log2(w / b)
    t = 0.0
    w = c + d
    if c > 0:
        t += c * np.log2(w / c)
    if d > 0:
        t += d * np.log2(w / d)
    return s + t


@inline
def _pair2(a, b, c, d, crit):
    """Score of a two-class split: w * impurity of (a, b) plus that of (c, d), both non-empty.

    Gini over one division: w_L - S_L / w_L + w_R - S_R / w_R = W - (S_L w_R + S_R w_L) / (w_L w_R).
    """
    wl = a + b
    wr = c + d
    if crit == GINI:
        return (wl + wr) - ((a * a + b * b) * wr + (c * c + d * d) * wl) / (wl * wr)
    return _ent_pair(a, b, c, d)


# ---- which codes are present ---------------------------------------------------------------------

# ---- level order of a categorical feature ------------------------------------------------------

@kernel
def sort_levels(J, keys, order, pc):
    """Reorder the present codes pc[0:J] by keys ascending, ties by code (stable); order: int32
    scratch of 256. Insertion sort: at most 254 levels, and a small loop compiles fast."""
    for j in range(J):
        key = keys[j]
        u = j
        while u > 0 and keys[order[u - 1]] > key:
            order[u] = order[u - 1]
            u -= 1
        order[u] = j
    for j in range(J):
        keys[j] = pc[order[j]]
    for j in range(J):
        pc[j] = np.int32(keys[j])


@kernel
def level_keys_classes(hist, q, J, pc, n_classes, key_class, keys):
    """Ordering key per present level: its in-bag share of key_class (class 1 for two classes, the
    node's most frequent class for more)."""
    for j in range(J):
        o = pc[j] * n_classes
        w = 0
        for k in range(n_classes):
            w += hist[q, o + k]
        keys[j] = np.float64(hist[q, o + key_class]) / np.float64(w)


@kernel
def level_keys_values(hist_w, hist_s, q, J, pc, keys):
    """Ordering key per present level: its weighted mean target (centred at the node mean)."""
    for j in range(J):
        keys[j] = hist_s[q, pc[j]] / np.float64(hist_w[q, pc[j]])


# ---- scans --------------------------------------------------------------------------------------

@kernel
def _entropy_scores(n, ta, tb, ma, mb, fl, work):
    """scan_two's score pass for entropy (a function of its own: slow anyway, and kept out of the
    inlined code that the tree kernel compiles)."""
    big = np.inf
    tw = ta + tb
    mw = ma + mb
    for j in range(n):
        a = work[0, j]
        b = work[1, j]
        c = ta - a
        d = tb - b
        wl = a + b
        wr = tw - wl
        if mw > 0:
            ok = wl + mw >= fl and wr >= fl
            work[2, j] = _ent_pair(a + ma, b + mb, c, d) if ok else big
            ok = wl >= fl and wr + mw >= fl
            work[3, j] = _ent_pair(a, b, c + ma, d + mb) if ok else big
        else:
            work[2, j] = _ent_pair(a, b, c, d) if (wl >= fl and wr >= fl) else big


@kernel
def scan_two(hist, q, J, pc, ta, tb, ma, mb, crit, fl, best, work, best_left):
    """scan_classes for two classes, in passes: prefix counts, every threshold's score
    (infeasible ones +inf), then the first minimum. Gini's pass has no branch and one division
    per score, so a compiler can vectorise it.

    ta, tb, ma, mb: class counts of the node's non-missing and missing rows; work: float64 [5, 256].

    With min_leaf 1, thresholds between two codes with the same class proportions are skipped:
    along such a run the score is a concave function of the weight moved left (w * Gini and
    w * entropy are concave in the counts), so no threshold inside a run beats both its ends
    (Breiman et al. 1984, sec. 4.3; Fayyad & Irani 1992), and the ends are kept. Deep nodes hold
    mostly single-row codes, so this drops most thresholds. (With a larger min_leaf an end may be
    infeasible, so every threshold is scanned.)
    """
    merge = fl <= 1.0
    n = 0
    a = 0.0
    b = 0.0
    if J >= 2:
        o = 2 * np.int64(np.uint32(pc[0]))
        na = np.float64(hist[q, o])
        nb = np.float64(hist[q, o + 1])
        for j in range(J - 1):
            ca = na
            cb = nb
            o = 2 * np.int64(np.uint32(pc[np.uint32(j + 1)]))
            na = np.float64(hist[q, o])
            nb = np.float64(hist[q, o + 1])
            a += ca
            b += cb
            work[0, n] = a
            work[1, n] = b
            work[4, n] = j
            # branch-free: the slot is overwritten unless this threshold ends a run
            n += np.int64(ca * nb != na * cb) | np.int64(not merge)
    tw = ta + tb
    mw = ma + mb
    big = np.inf
    if crit == GINI and mw > 0:
        for j in range(n):
            a = work[0, j]
            b = work[1, j]
            c = ta - a
            d = tb - b
            wl = a + b
            wr = tw - wl
            # missing left: (a + ma, b + mb) | (c, d); missing right: (a, b) | (c + ma, d + mb)
            al = a + ma
            bl = b + mb
            x = (tw + mw) - ((al * al + bl * bl) * wr + (c * c + d * d) * (wl + mw)) / ((wl + mw) * wr)
            work[2, j] = x if (wl + mw >= fl and wr >= fl) else big
            cr = c + ma
            dr = d + mb
            y = (tw + mw) - ((a * a + b * b) * (wr + mw) + (cr * cr + dr * dr) * wl) / (wl * (wr + mw))
            work[3, j] = y if (wl >= fl and wr + mw >= fl) else big
    elif crit == GINI:
        for j in range(n):
            a = work[0, j]
            b = work[1, j]
            c = ta - a
            d = tb - b
            wl = a + b
            wr = tw - wl
            x = tw - ((a * a + b * b) * wr + (c * c + d * d) * wl) / (wl * wr)
            work[2, j] = x if (wl >= fl and wr >= fl) else big
    else:
        _entropy_scores(n, ta, tb, ma, mb, fl, work)
    bscore = best
    bj = -1
    bml = 0
    for j in range(n):
        if work[2, j] < bscore:
            bscore = work[2, j]
            bj = j
            bml = 1
        if mw > 0 and work[3, j] < bscore:
            bscore = work[3, j]
            bj = j
            bml = 0
    bpos = -1
    if bj >= 0:
        bpos = np.int64(work[4, bj])
        a = work[0, bj]
        b = work[1, bj]
        if mw > 0:
            best_left[0] = a + (ma if bml else 0.0)
            best_left[1] = b + (mb if bml else 0.0)
        else:
            # no in-bag missing row: unseen missing values follow the heavier child
            bml = 1 if a + b >= tw - (a + b) else 0
            best_left[0] = a
            best_left[1] = b
    if J >= 1 and mw >= fl and tw >= fl:
        x = _pair2(ta, tb, ma, mb, crit)
        if x < bscore:
            bscore, bpos, bml = x, J - 1, 0
            best_left[0] = ta
            best_left[1] = tb
    return bscore, bpos, bml


@kernel
def scan_classes(hist, q, J, pc, node_cnt, n_classes, crit, min_leaf, best, lc, tot, miss, best_left):
    """Best prefix split of the present codes pc[0:J], in that order (any number of classes; two
    classes go through the faster scan_two), scoring below `best`.

    Returns (score, pos, missing_left): left = codes pc[0..pos]; pos = -1 when none beats
    best, and best_left is then untouched; otherwise it holds the left child's class counts.
    pos = J - 1 with missing_left 0 is the split "every present code left, missing alone right".
    """
    mo = MISSING * n_classes
    tw = 0.0
    mw = 0.0
    for k in range(n_classes):
        miss[k] = hist[q, mo + k]
        tot[k] = node_cnt[k] - miss[k]
        lc[k] = 0.0
        tw += tot[k]
        mw += miss[k]
    # the two children's counts of the split under test (one impurity function, not one inlined
    # copy per way of forming them: that cost seconds of compile time)
    a = np.empty(n_classes)
    b = np.empty(n_classes)
    fl = np.float64(min_leaf)
    bscore = best
    bpos = -1
    bml = 0
    wl = 0.0
    for j in range(J - 1):
        o = pc[j] * n_classes
        for k in range(n_classes):
            c = hist[q, o + k]
            lc[k] += c
            wl += c
        wr = tw - wl
        if mw > 0:
            if wl + mw >= fl and wr >= fl:
                for k in range(n_classes):
                    a[k] = lc[k] + miss[k]
                    b[k] = tot[k] - lc[k]
                s = wimp_counts(a, n_classes, crit) + wimp_counts(b, n_classes, crit)
                if s < bscore:
                    bscore, bpos, bml = s, j, 1
                    for k in range(n_classes):
                        best_left[k] = lc[k] + miss[k]
            if wl >= fl and wr + mw >= fl:
                for k in range(n_classes):
                    a[k] = lc[k]
                    b[k] = (tot[k] - lc[k]) + miss[k]
                s = wimp_counts(a, n_classes, crit) + wimp_counts(b, n_classes, crit)
                if s < bscore:
                    bscore, bpos, bml = s, j, 0
                    for k in range(n_classes):
                        best_left[k] = lc[k]
        elif wl >= fl and wr >= fl:
            for k in range(n_classes):
                a[k] = lc[k]
                b[k] = tot[k] - lc[k]
            s = wimp_counts(a, n_classes, crit) + wimp_counts(b, n_classes, crit)
            if s < bscore:
                bscore, bpos, bml = s, j, (1 if wl >= wr else 0)
                for k in range(n_classes):
                    best_left[k] = lc[k]
    if J >= 1 and mw >= fl and tw >= fl:
        for k in range(n_classes):
            a[k] = tot[k]
            b[k] = (tot[k] - tot[k]) + miss[k]
        s = wimp_counts(a, n_classes, crit) + wimp_counts(b, n_classes, crit)
        if s < bscore:
            bscore, bpos, bml = s, J - 1, 0
            for k in range(n_classes):
                best_left[k] = tot[k]
    return bscore, bpos, bml


@kernel
def scan_values(hist_w, hist_s, h, J, pc, q, min_leaf, best, work):
    """Best prefix split of candidate h's present codes pc[0:J] (regression); q: the node's SSE.

    Same contract as scan_classes, in passes as scan_two (without skipping: equal means are rare).
    Score = q - (S_L^2 W_R + S_R^2 W_L) / (W_L W_R), the children's weighted SSE, with S centred
    sums (one division per score).
    """
    tw = 0.0
    ts = 0.0
    for j in range(J):
        tw += hist_w[h, pc[j]]
        ts += hist_s[h, pc[j]]
    mw = np.float64(hist_w[h, MISSING])
    ms = hist_s[h, MISSING]
    fl = np.float64(min_leaf)
    n = J - 1
    wl = 0.0
    sl = 0.0
    for j in range(n):
        o = pc[j]
        wl += hist_w[h, o]
        sl += hist_s[h, o]
        work[0, j] = wl
        work[1, j] = sl
    big = np.inf
    for j in range(n):
        wl = work[0, j]
        sl = work[1, j]
        wr = tw - wl
        sr = ts - sl
        if mw > 0:
            a = sl + ms
            x = q - (a * a * wr + sr * sr * (wl + mw)) / ((wl + mw) * wr)
            work[2, j] = x if (wl + mw >= fl and wr >= fl) else big
            a = sr + ms
            y = q - (sl * sl * (wr + mw) + a * a * wl) / (wl * (wr + mw))
            work[3, j] = y if (wl >= fl and wr + mw >= fl) else big
        else:
            x = q - (sl * sl * wr + sr * sr * wl) / (wl * wr)
            work[2, j] = x if (wl >= fl and wr >= fl) else big
    bscore = best
    bpos = -1
    bml = 0
    for j in range(n):
        if work[2, j] < bscore:
            bscore, bpos, bml = work[2, j], j, 1
        if mw > 0 and work[3, j] < bscore:
            bscore, bpos, bml = work[3, j], j, 0
    if bpos >= 0 and mw == 0:
        # no in-bag missing row: unseen missing values follow the heavier child
        bml = 1 if work[0, bpos] >= tw - work[0, bpos] else 0
    if J >= 1 and mw >= fl and tw >= fl:
        x = q - (ts * ts / tw + ms * ms / mw)
        if x < bscore:
            bscore, bpos, bml = x, J - 1, 0
    return bscore, bpos, bml


@kernel
def scan_two_rows(c0, c1, cat, regression, crit, fl, best, q, w0, w1, k0, k1, s0, s1, n0, n1):
    """The split search of one candidate at a node of two distinct in-bag rows (a third or more of
    the internal nodes of a full regression tree), from the two rows' codes c0, c1 alone: the same
    result, to the last bit, as building the histogram and calling scan_two (two classes) or
    scan_values (regression), which cost several times as much at this size. Scalars only, so the
    call updates no reference counts.

    w0, w1: draw counts; k0, k1: classes (two classes: they differ, or the node would be pure);
    s0, s1: w * (y - node mean) (regression); n0, n1: the node's weight per class; q: its SSE.
    Returns (counts, score, code, missing_left, left0, left1): counts 0 when the feature is constant
    in the node; code -1 when nothing beats best, else the largest code going left (numeric) or the
    one level going left (categorical); left0, left1: the left child's class weights.
    """
    if c0 == c1:
        return 0, best, -1, 0, 0.0, 0.0
    if c0 == MISSING or c1 == MISSING:
        # one present code: only "it left, missing alone right" (the scans' last candidate)
        if c0 == MISSING:
            code, wp, wm, km, sp, sm = c1, w1, w0, k0, s1, s0
        else:
            code, wp, wm, km, sp, sm = c0, w0, w1, k1, s0, s1
        if regression:
            tw = 0.0 + np.float64(wp)
            ts = 0.0 + sp
            mw = np.float64(wm)
            if mw >= fl and tw >= fl:
                x = q - (ts * ts / tw + sm * sm / mw)
                if x < best:
                    return 1, x, code, 0, 0.0, 0.0
            return 1, best, -1, 0, 0.0, 0.0
        ma = np.float64(wm) if km == 0 else 0.0
        mb = np.float64(wm) if km == 1 else 0.0
        ta = n0 - ma
        tb = n1 - mb
        if ma + mb >= fl and ta + tb >= fl:
            x = _pair2(ta, tb, ma, mb, crit)
            if x < best:
                return 1, x, code, 0, ta, tb
        return 1, best, -1, 0, 0.0, 0.0
    # two present codes: which one the scan meets first (code order; levels by their key, ties by code)
    first0 = c0 < c1
    if cat:
        if regression:
            key0 = s0 / np.float64(w0)
            key1 = s1 / np.float64(w1)
        else:
            key0 = np.float64(w0 if k0 == 1 else 0) / np.float64(w0)  # share of class 1
            key1 = np.float64(w1 if k1 == 1 else 0) / np.float64(w1)
        first0 = key0 < key1 or (key0 == key1 and c0 < c1)
    if first0:
        code, wf, kf, sf, ws_, ss = c0, w0, k0, s0, w1, s1
    else:
        code, wf, kf, sf, ws_, ss = c1, w1, k1, s1, w0, s0
    if regression:
        wl = 0.0 + np.float64(wf)
        tw = wl + np.float64(ws_)
        sl = 0.0 + sf
        ts = sl + ss
        wr = tw - wl
        sr = ts - sl
        if wl >= fl and wr >= fl:
            x = q - (sl * sl * wr + sr * sr * wl) / (wl * wr)
            if x < best:
                return 1, x, code, (1 if wl >= tw - wl else 0), 0.0, 0.0
        return 1, best, -1, 0, 0.0, 0.0
    a = np.float64(wf) if kf == 0 else 0.0
    b = np.float64(wf) if kf == 1 else 0.0
    tw = n0 + n1
    c = n0 - a
    d = n1 - b
    wl = a + b
    wr = tw - wl
    if wl >= fl and wr >= fl:
        if crit == GINI:
            x = tw - ((a * a + b * b) * wr + (c * c + d * d) * wl) / (wl * wr)
        else:
            x = _ent_pair(a, b, c, d)
        if x < best:
            return 1, x, code, (1 if a + b >= tw - (a + b) else 0), a, b
    return 1, best, -1, 0, 0.0, 0.0
