"""numba kernels of the measures' estimate for the kept ensemble: the expected log loss of b votes and
the AUC of b-vote shares under two priors (see baggr/oob/measure_fit.py for the method and sources).

Binomial probabilities are walked outward from the mode by the ratio P(x + 1) / P(x) =
(b - x) p / ((x + 1) q), starting from the mode's log-probability (lgamma): no underflow at any b.
"""
import math

import numpy as np

from baggr.jit import kernel

SD_EXACT = 20.0      # above this standard deviation of the vote count, the moment expansion


@kernel
def _pmf_span(b, p, lo_out, w):
    """Binomial(b, p) probabilities of the counts that matter (within 12 standard deviations of the
    mean, and a few more), into w[0 : hi - lo + 1]; returns (lo, hi). p strictly inside (0, 1)."""
    q = 1.0 - p
    mean = b * p
    sd = math.sqrt(b * p * q)
    lo = max(0, int(mean - 12.0 * sd) - 2)
    hi = min(b, int(mean + 12.0 * sd) + 3)
    mode = min(hi, max(lo, int(math.floor((b + 1) * p))))
    lw = math.lgamma(b + 1.0) - math.lgamma(mode + 1.0) - math.lgamma(b - mode + 1.0) + \
        mode * math.log(p) + (b - mode) * math.log1p(-p)
    w[mode - lo] = math.exp(lw)
    r = p / q
    for x in range(mode, hi):
        w[x + 1 - lo] = w[x - lo] * (b - x) / (x + 1.0) * r
    for x in range(mode, lo, -1):
        w[x - 1 - lo] = w[x - lo] * x / ((b - x + 1.0) * r)
    lo_out[0] = lo
    return hi


@kernel
def log_loss_table(p, sizes, half_c):
    """(P, S) expected -log((X + 1/2) / (b + half_c)), X ~ Binomial(b, p[i]), b = sizes[s].

    Exact sums while the count's standard deviation is at most SD_EXACT; above it, the expansion of
    E[log(m + D)] about m = b p + 1/2 to the fourth central moment of D (its error is of order
    (b p q)^-3, below 1e-7 there)."""
    out = np.empty((p.shape[0], sizes.shape[0]))
    w = np.empty(int(24.0 * SD_EXACT) + 16)
    lo_box = np.zeros(1, np.int64)
    for i in range(p.shape[0]):
        pi = p[i]
        q = 1.0 - pi
        for s in range(sizes.shape[0]):
            b = sizes[s]
            den = math.log(b + half_c)
            if pi <= 0.0:
                out[i, s] = den - math.log(0.5)
                continue
            if q <= 0.0:
                out[i, s] = den - math.log(b + 0.5)
                continue
            v = b * pi * q
            if v > SD_EXACT * SD_EXACT:
                m = b * pi + 0.5
                mu3 = v * (q - pi)
                mu4 = 3.0 * v * v + v * (1.0 - 6.0 * pi * q)
                e_log = math.log(m) - v / (2.0 * m * m) + mu3 / (3.0 * m ** 3) - mu4 / (4.0 * m ** 4)
                out[i, s] = den - e_log
                continue
            hi = _pmf_span(b, pi, lo_box, w)
            lo = lo_box[0]
            acc = 0.0
            tot = 0.0
            for x in range(lo, hi + 1):
                acc += w[x - lo] * math.log(x + 0.5)
                tot += w[x - lo]
            out[i, s] = den - acc / tot
    return out


@kernel
def auc_tables(r, pi1, pi0, sizes):
    """The AUC of b-vote shares and its gradients, for every b in sizes.

    A positive row votes for the positive class with chance r[j], j drawn from pi1; a negative row
    with chance r[l], l drawn from pi0 (r: the grid of chances of a vote for the positive class);
    the b votes are Binomial(b, r). AUC_b = P(X_pos > X_neg) + P(X_pos = X_neg) / 2, the two rows'
    votes independent. Returns (auc (S,), d auc / d pi1 (G, S), d auc / d pi0 (G, S))."""
    g = r.shape[0]
    n_s = sizes.shape[0]
    auc = np.zeros(n_s)
    grad1 = np.zeros((g, n_s))
    grad0 = np.zeros((g, n_s))
    bmax = 0
    for s in range(n_s):
        bmax = max(bmax, sizes[s])
    f1 = np.zeros(bmax + 1)
    f0 = np.zeros(bmax + 1)
    h1 = np.zeros(bmax + 1)
    h0 = np.zeros(bmax + 1)
    w = np.zeros(bmax + 1)
    lo_box = np.zeros(1, np.int64)
    spans = np.zeros((g, 2), np.int64)
    pm = np.zeros((g, bmax + 1))
    for s in range(n_s):
        b = sizes[s]
        f1[: b + 1] = 0.0
        f0[: b + 1] = 0.0
        for j in range(g):
            rj = r[j]
            if rj <= 0.0 or rj >= 1.0:
                x = 0 if rj <= 0.0 else b
                spans[j, 0] = x
                spans[j, 1] = x
                pm[j, 0] = 1.0
            else:
                hi = _pmf_span(b, rj, lo_box, w)
                spans[j, 0] = lo_box[0]
                spans[j, 1] = hi
                for x in range(lo_box[0], hi + 1):
                    pm[j, x - lo_box[0]] = w[x - lo_box[0]]
            for x in range(spans[j, 0], spans[j, 1] + 1):
                f1[x] += pi1[j] * pm[j, x - spans[j, 0]]
                f0[x] += pi0[j] * pm[j, x - spans[j, 0]]
        # h1[x] = P(X_neg < x) + P(X_neg = x) / 2; h0[x] = P(X_pos > x) + P(X_pos = x) / 2
        below = 0.0
        for x in range(b + 1):
            h1[x] = below + 0.5 * f0[x]
            below += f0[x]
        above = 0.0
        for x in range(b, -1, -1):
            h0[x] = above + 0.5 * f1[x]
            above += f1[x]
        a = 0.0
        for x in range(b + 1):
            a += f1[x] * h1[x]
        auc[s] = a
        for j in range(g):
            s1 = 0.0
            s0 = 0.0
            for x in range(spans[j, 0], spans[j, 1] + 1):
                pj = pm[j, x - spans[j, 0]]
                s1 += pj * h1[x]
                s0 += pj * h0[x]
            grad1[j, s] = s1
            grad0[j, s] = s0
    return auc, grad1, grad0
