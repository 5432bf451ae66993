"""numba kernels of the split search at one node: per-code statistics and the best prefix split.

A feature's in-bag statistics at a node go into a 256-bin histogram (bin 255 = missing). The
codes present in the node are then listed in ascending order (`pc[0:J]`) in one of two ways:
large nodes test every bin for a count; small nodes (the exact path) set a bit per row in a
256-bit map and read the set bits in order, so neither clearing nor scanning all 256 bins is
needed. The scans below read only the listed bins, so the two ways give bit-identical splits.

Scores are the weighted child impurity w_L * imp(L) + w_R * imp(R): Gini (1 - sum p_k^2),
entropy in bits (-sum p_k log2 p_k) or, for regression, the weighted sum of squared deviations,
computed as Q - (S_L^2 / W_L + S_R^2 / W_R) with y centred at the node mean (Q is the node's
SSE, fixed at the node).
"""
import numpy as np

from .jit import kernel

GINI = 0
ENTROPY = 1
VARIANCE = 2
MISSING = 255

# de Bruijn sequence for the index of the lowest set bit (Leiserson, Prokop, Randall 1998)
_DEBRUIJN = np.uint64(0x03F79D71B4CB0A89)
_BIT_INDEX = np.zeros(64, np.int32)
for _i in range(64):
    _BIT_INDEX[((1 << _i) * 0x03F79D71B4CB0A89 % (1 << 64)) >> 58] = _i


@kernel
def wimp_counts(cnt, off, n_classes, crit):
    """w * impurity of the class counts cnt[off:off+n_classes] (Gini or entropy in bits)."""
    w = 0.0
    for k in range(n_classes):
        w += cnt[off + k]
    if w <= 0:
        return 0.0
    s = 0.0
    if crit == GINI:
        for k in range(n_classes):
            c = np.float64(cnt[off + k])
            s += c * c
        return w - s / w
    for k in range(n_classes):
        c = np.float64(cnt[off + k])
        if c > 0:
            s += c * np.log2(w / c)
    return s


@kernel
def impurity_counts(cnt, crit):
    """Impurity of a class count vector: Gini (1 - sum p^2) or entropy in bits."""
    w = 0.0
    for k in range(cnt.shape[0]):
        w += cnt[k]
    if w <= 0:
        return 0.0
    return wimp_counts(cnt, 0, cnt.shape[0], crit) / w


@kernel
def _wimp2(a, b, crit):
    """w * impurity of two class counts (floats holding whole numbers)."""
    w = a + b
    if crit == GINI:
        return w - (a * a + b * b) / w
    s = 0.0
    if a > 0:
        s += a * np.log2(w / a)
    if b > 0:
        s += b * np.log2(w / b)
    return s


@kernel
def _wimp_side(lc, tot, miss, n_classes, crit, right, with_miss):
    """w * impurity of one child: left = lc, right = tot - lc, each plus miss when with_miss."""
    w = 0.0
    for k in range(n_classes):
        c = tot[k] - lc[k] if right else lc[k]
        if with_miss:
            c += miss[k]
        w += c
    if w <= 0:
        return 0.0
    s = 0.0
    if crit == GINI:
        for k in range(n_classes):
            c = tot[k] - lc[k] if right else lc[k]
            if with_miss:
                c += miss[k]
            s += c * c
        return w - s / w
    for k in range(n_classes):
        c = tot[k] - lc[k] if right else lc[k]
        if with_miss:
            c += miss[k]
        if c > 0:
            s += c * np.log2(w / c)
    return s


# ---- which codes are present ---------------------------------------------------------------------

@kernel
def bits_to_codes(bits, pc):
    """Codes of the set bits of a 256-bit map (bit 255, missing, excluded) in ascending order; returns J."""
    j = 0
    one = np.uint64(1)
    for word in range(4):
        x = bits[word]
        if word == 3:
            x &= ~(one << np.uint64(63))
        while x != 0:
            low = x & (~x + one)
            pc[j] = word * 64 + _BIT_INDEX[(low * _DEBRUIJN) >> np.uint64(58)]
            j += 1
            x ^= low
        bits[word] = 0
    return j


@kernel
def build_classes(codes_f, idx, lab, wt, lo, hi, n_classes, nb, sparse, hist, bits, pc):
    """Histogram of weighted class counts per code over the node's rows; lists present codes, returns J."""
    if sparse:
        one = np.uint64(1)
        for i in range(lo, hi):
            b = np.int64(codes_f[idx[i]])
            hist[b * n_classes + lab[i]] += wt[i]
            bits[b >> 6] |= one << np.uint64(b & 63)
        return bits_to_codes(bits, pc)
    for i in range(lo, hi):
        hist[np.int64(codes_f[idx[i]]) * n_classes + lab[i]] += wt[i]
    j = 0
    if n_classes == 2:
        for b in range(nb):
            if hist[2 * b] + hist[2 * b + 1] > 0:
                pc[j] = b
                j += 1
        return j
    for b in range(nb):
        o = b * n_classes
        s = 0
        for k in range(n_classes):
            s += hist[o + k]
        if s > 0:
            pc[j] = b
            j += 1
    return j


@kernel
def build_values(codes_f, idx, wt, ws, lo, hi, nb, sparse, hist_w, hist_s, bits, pc):
    """Histogram of sum w and sum w*(y - node mean) per code over the node's rows; returns J."""
    if sparse:
        one = np.uint64(1)
        for i in range(lo, hi):
            b = np.int64(codes_f[idx[i]])
            hist_w[b] += wt[i]
            hist_s[b] += ws[i]
            bits[b >> 6] |= one << np.uint64(b & 63)
        return bits_to_codes(bits, pc)
    for i in range(lo, hi):
        b = codes_f[idx[i]]
        hist_w[b] += wt[i]
        hist_s[b] += ws[i]
    j = 0
    for b in range(nb):
        if hist_w[b] > 0:
            pc[j] = b
            j += 1
    return j


@kernel
def clear_classes(J, pc, n_classes, hist):
    """Zero the listed bins and the missing bin."""
    for j in range(J):
        o = pc[j] * n_classes
        for k in range(n_classes):
            hist[o + k] = 0
    for k in range(n_classes):
        hist[MISSING * n_classes + k] = 0


@kernel
def clear_values(J, pc, hist_w, hist_s):
    """Zero the listed bins and the missing bin."""
    for j in range(J):
        hist_w[pc[j]] = 0
        hist_s[pc[j]] = 0.0
    hist_w[MISSING] = 0
    hist_s[MISSING] = 0.0


# ---- level order of a categorical feature ------------------------------------------------------

@kernel
def sort_levels(J, keys, order):
    """order[0:J] = positions 0..J-1 sorted by keys ascending, ties by position (stable)."""
    if J > 32:
        o = np.argsort(keys[:J], kind="mergesort")
        for j in range(J):
            order[j] = o[j]
        return
    for j in range(J):
        key = keys[j]
        u = j
        while u > 0 and keys[order[u - 1]] > key:
            order[u] = order[u - 1]
            u -= 1
        order[u] = j


@kernel
def level_keys_classes(J, pc, hist, n_classes, key_class, keys):
    """Ordering key per present level: its in-bag share of key_class (class 1 for two classes)."""
    for j in range(J):
        o = pc[j] * n_classes
        w = 0
        for k in range(n_classes):
            w += hist[o + k]
        keys[j] = np.float64(hist[o + key_class]) / np.float64(w)


@kernel
def level_keys_values(J, pc, hist_w, hist_s, keys):
    """Ordering key per present level: its weighted mean target (centred at the node mean)."""
    for j in range(J):
        keys[j] = hist_s[pc[j]] / np.float64(hist_w[pc[j]])


# ---- scans --------------------------------------------------------------------------------------

@kernel
def scan_classes(J, pc, order, hist, node_cnt, n_classes, crit, min_leaf, best, lc, tot, miss, best_left):
    """Best prefix split of the present codes pc[order[0..]] (classes) scoring below `best`.

    Returns (score, pos, missing_left): left = codes pc[order[0..pos]]; pos = -1 when none beats
    best, and best_left is then untouched; otherwise it holds the left child's class counts.
    pos = J - 1 with missing_left 0 is the split "every present code left, missing alone right".
    """
    mo = MISSING * n_classes
    tw = 0.0
    mw = 0.0
    for k in range(n_classes):
        miss[k] = hist[mo + k]
        tot[k] = node_cnt[k] - miss[k]
        lc[k] = 0.0
        tw += tot[k]
        mw += miss[k]
    fl = np.float64(min_leaf)
    bscore = best
    bpos = -1
    bml = 0
    wl = 0.0
    if n_classes == 2:
        a = 0.0
        b = 0.0
        ta = tot[0]
        tb = tot[1]
        ma = miss[0]
        mb = miss[1]
        for j in range(J - 1):
            o = pc[order[j]] * 2
            a += hist[o]
            b += hist[o + 1]
            wl = a + b
            wr = tw - wl
            if mw > 0:
                if wl + mw >= fl and wr >= fl:
                    s = _wimp2(a + ma, b + mb, crit) + _wimp2(ta - a, tb - b, crit)
                    if s < bscore:
                        bscore, bpos, bml = s, j, 1
                        best_left[0] = a + ma
                        best_left[1] = b + mb
                if wl >= fl and wr + mw >= fl:
                    s = _wimp2(a, b, crit) + _wimp2(ta - a + ma, tb - b + mb, crit)
                    if s < bscore:
                        bscore, bpos, bml = s, j, 0
                        best_left[0] = a
                        best_left[1] = b
            elif wl >= fl and wr >= fl:
                s = _wimp2(a, b, crit) + _wimp2(ta - a, tb - b, crit)
                if s < bscore:
                    # no in-bag missing row: unseen missing values follow the heavier child
                    bscore, bpos, bml = s, j, (1 if wl >= wr else 0)
                    best_left[0] = a
                    best_left[1] = b
        if J >= 1 and mw >= fl and tw >= fl:
            s = _wimp2(ta, tb, crit) + _wimp2(ma, mb, crit)
            if s < bscore:
                bscore, bpos, bml = s, J - 1, 0
                best_left[0] = ta
                best_left[1] = tb
        return bscore, bpos, bml
    for j in range(J - 1):
        o = pc[order[j]] * n_classes
        for k in range(n_classes):
            c = hist[o + k]
            lc[k] += c
            wl += c
        wr = tw - wl
        if mw > 0:
            if wl + mw >= fl and wr >= fl:
                s = (_wimp_side(lc, tot, miss, n_classes, crit, False, True)
                     + _wimp_side(lc, tot, miss, n_classes, crit, True, False))
                if s < bscore:
                    bscore, bpos, bml = s, j, 1
                    for k in range(n_classes):
                        best_left[k] = lc[k] + miss[k]
            if wl >= fl and wr + mw >= fl:
                s = (_wimp_side(lc, tot, miss, n_classes, crit, False, False)
                     + _wimp_side(lc, tot, miss, n_classes, crit, True, True))
                if s < bscore:
                    bscore, bpos, bml = s, j, 0
                    for k in range(n_classes):
                        best_left[k] = lc[k]
        elif wl >= fl and wr >= fl:
            s = (_wimp_side(lc, tot, miss, n_classes, crit, False, False)
                 + _wimp_side(lc, tot, miss, n_classes, crit, True, False))
            if s < bscore:
                bscore, bpos, bml = s, j, (1 if wl >= wr else 0)
                for k in range(n_classes):
                    best_left[k] = lc[k]
    if J >= 1 and mw >= fl and tw >= fl:
        s = (_wimp_side(tot, tot, miss, n_classes, crit, False, False)
             + _wimp_side(tot, tot, miss, n_classes, crit, True, True))
        if s < bscore:
            bscore, bpos, bml = s, J - 1, 0
            for k in range(n_classes):
                best_left[k] = tot[k]
    return bscore, bpos, bml


@kernel
def scan_values(J, pc, order, hist_w, hist_s, q, min_leaf, best):
    """Best prefix split of the present codes pc[order[0..]] (regression); same contract as scan_classes.

    Score = q - (S_L^2 / W_L + S_R^2 / W_R), the children's weighted SSE, with S centred sums.
    """
    tw = 0
    ts = 0.0
    for j in range(J):
        tw += hist_w[pc[j]]
        ts += hist_s[pc[j]]
    mw = hist_w[MISSING]
    ms = hist_s[MISSING]
    bscore = best
    bpos = -1
    bml = 0
    wl = 0
    sl = 0.0
    for j in range(J - 1):
        o = pc[order[j]]
        wl += hist_w[o]
        sl += hist_s[o]
        wr = tw - wl
        sr = ts - sl
        if mw > 0:
            if wl + mw >= min_leaf and wr >= min_leaf:
                a = sl + ms
                s = q - (a * a / np.float64(wl + mw) + sr * sr / np.float64(wr))
                if s < bscore:
                    bscore, bpos, bml = s, j, 1
            if wl >= min_leaf and wr + mw >= min_leaf:
                a = sr + ms
                s = q - (sl * sl / np.float64(wl) + a * a / np.float64(wr + mw))
                if s < bscore:
                    bscore, bpos, bml = s, j, 0
        elif wl >= min_leaf and wr >= min_leaf:
            s = q - (sl * sl / np.float64(wl) + sr * sr / np.float64(wr))
            if s < bscore:
                bscore, bpos, bml = s, j, (1 if wl >= wr else 0)
    if J >= 1 and mw >= min_leaf and tw >= min_leaf:
        s = q - (ts * ts / np.float64(tw) + ms * ms / np.float64(mw))
        if s < bscore:
            bscore, bpos, bml = s, J - 1, 0
    return bscore, bpos, bml
