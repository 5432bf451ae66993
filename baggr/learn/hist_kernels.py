"""numba kernels that gather a node's per-code statistics for a batch of candidate features.

Histograms have 256 bins per candidate (bin 255 = missing): weighted class counts (classes) or
sum w and sum w*(y - node mean) (regression), built from the feature-major codes (p, n) one
candidate after another. (Reading a row-major copy in deep nodes, whose rows are scattered, so
that one cache line serves all candidates of a row, was tried: no faster on twonorm.)

The codes present are then listed in ascending order (`pc[0:J]`): large nodes test every bin;
small nodes (the exact path) set a bit per row in a 256-bit map and read the set bits in order,
so neither clearing nor scanning all 256 bins is needed. The scans read only the listed bins, so
both ways give bit-identical splits.

Row loops index with unsigned positions and row numbers: numba then drops the negative-index
wraparound it otherwise adds to every access (several operations per visit).
"""
import numpy as np

from baggr.jit import kernel
from baggr.learn.split_kernels import MISSING, inline

# de Bruijn sequence for the index of the lowest set bit (Leiserson, Prokop, Randall 1998)
_DEBRUIJN = np.uint64(0x03F79D71B4CB0A89)
_BIT_INDEX = np.zeros(64, np.int64)
for _i in range(64):
    _BIT_INDEX[((1 << _i) * 0x03F79D71B4CB0A89 % (1 << 64)) >> 58] = _i


@inline
def _set_bit(bits, q, b):
    """Mark code b as present in candidate q's 256-bit map."""
    bits[q, b >> 6] |= np.uint64(1) << np.uint64(b & 63)


@kernel
def build_classes(codes, idx, lw, src, shift, lo, hi, n_classes, batch, n_batch, sparse, hist, bits):
    """Class-count histograms hist[q] of candidates batch[0:n_batch] over node positions lo..hi-1.

    The node's rows are idx[src, lo:hi]; lw packs each row's draw count and class:
    (weight << shift) | class. sparse: also mark the codes seen in bits[q].
    """
    mask = (1 << shift) - 1
    a = np.uint64(src)
    for q in range(n_batch):
        f = np.uint64(batch[q])
        if n_classes == 2:
            # literal constants: faster than the general loop
            if sparse:
                for i in range(lo, hi):
                    u = np.uint64(i)
                    b = np.int64(codes[f, np.uint64(idx[a, u])])
                    v = lw[a, u]
                    hist[q, 2 * b + (v & 1)] += v >> 1
                    _set_bit(bits, q, b)
            else:
                for i in range(lo, hi):
                    u = np.uint64(i)
                    v = lw[a, u]
                    hist[q, 2 * np.int64(codes[f, np.uint64(idx[a, u])]) + (v & 1)] += v >> 1
        else:
            for i in range(lo, hi):
                u = np.uint64(i)
                b = np.int64(codes[f, np.uint64(idx[a, u])])
                v = lw[a, u]
                hist[q, b * n_classes + (v & mask)] += v >> shift
                if sparse:
                    _set_bit(bits, q, b)


@kernel
def build_values(codes, idx, wt, src, ws, lo, hi, batch, n_batch, sparse, hist_w, hist_s, bits):
    """Regression histograms (sum w, sum w*(y - node mean)) of candidates batch[0:n_batch]."""
    a = np.uint64(src)
    for q in range(n_batch):
        f = np.uint64(batch[q])
        for i in range(lo, hi):
            u = np.uint64(i)
            b = np.int64(codes[f, np.uint64(idx[a, u])])
            hist_w[q, b] += wt[a, u]
            hist_s[q, b] += ws[u]
            if sparse:
                _set_bit(bits, q, b)


@inline
def bits_to_codes(bits, q, pc):
    """Codes of the set bits of bits[q] (bit 255, missing, excluded) in ascending order; clears them; returns J."""
    j = 0
    one = np.uint64(1)
    for word in range(4):
        x = bits[q, word]
        if word == 3:
            x &= ~(one << np.uint64(63))
        while x != 0:
            low = x & (~x + one)
            pc[j] = word * 64 + _BIT_INDEX[(low * _DEBRUIJN) >> np.uint64(58)]
            j += 1
            x ^= low
        bits[q, word] = 0
    return j


@kernel
def list_classes(hist, q, nb, n_classes, sparse, bits, pc):
    """List the codes present in hist[q] in ascending order; returns J (branch-free on large nodes)."""
    if sparse:
        return bits_to_codes(bits, q, pc)
    j = 0
    if n_classes == 2:
        for b in range(nb):
            pc[j] = b
            j += np.int64(hist[q, 2 * b] + hist[q, 2 * b + 1] > 0)
        return j
    for b in range(nb):
        o = b * n_classes
        s = 0
        for k in range(n_classes):
            s += hist[q, o + k]
        pc[j] = b
        j += np.int64(s > 0)
    return j


@kernel
def list_values(hist_w, q, nb, sparse, bits, pc):
    """List the codes present in hist_w[q] in ascending order; returns J."""
    if sparse:
        return bits_to_codes(bits, q, pc)
    j = 0
    for b in range(nb):
        pc[j] = b
        j += np.int64(hist_w[q, b] > 0)
    return j


@inline
def clear_classes(hist, q, J, pc, n_classes, sparse):
    """Zero hist[q] again: the listed bins and the missing bin, or (large nodes) the whole row."""
    if not sparse:
        for t in range(256 * n_classes):  # compiled to a memset
            hist[q, t] = 0
        return
    if n_classes == 2:
        for j in range(J):
            hist[q, 2 * pc[j]] = 0
            hist[q, 2 * pc[j] + 1] = 0
        hist[q, 2 * MISSING] = 0
        hist[q, 2 * MISSING + 1] = 0
        return
    for j in range(J):
        o = pc[j] * n_classes
        for k in range(n_classes):
            hist[q, o + k] = 0
    for k in range(n_classes):
        hist[q, MISSING * n_classes + k] = 0


@inline
def clear_values(hist_w, hist_s, q, J, pc, sparse):
    """Zero hist_w[q] and hist_s[q] again: the listed bins and the missing bin, or the whole rows."""
    if not sparse:
        for t in range(256):
            hist_w[q, t] = 0
            hist_s[q, t] = 0.0
        return
    for j in range(J):
        hist_w[q, pc[j]] = 0
        hist_s[q, pc[j]] = 0.0
    hist_w[q, MISSING] = 0
    hist_s[q, MISSING] = 0.0
