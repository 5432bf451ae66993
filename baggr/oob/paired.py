"""Paired comparisons of two ensembles judged on the same OOB rows: the exact McNemar test, paired
intervals for a difference in error or in a mean per-row loss, DeLong's paired AUC test, and
Holm's adjustment across several comparisons. numpy and the standard library only.

Every function takes per-row figures of the rows both ensembles judged (covered by both) and
returns a Paired: the difference a - b, its 95% interval, the standard error and a two-sided p-value.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from baggr.oob.intervals import Z95


@dataclass(frozen=True)
class Paired:
    """The difference a - b of one measure on the same rows, with its 95% interval and p-value."""

    difference: float
    interval: tuple[float, float]
    se: float
    p_value: float
    rows: int
    method: str


def normal_p(z: float) -> float:
    """Two-sided p-value of a standard normal statistic: P(|Z| >= |z|) = erfc(|z| / sqrt 2)."""
    if not math.isfinite(z):
        return 0.0 if not math.isnan(z) else float("nan")
    return math.erfc(abs(z) / math.sqrt(2.0))


# ---------------------------------------------------------------- error: McNemar

def binomial_half_cdf(k: int, n: int) -> float:
    """P(X <= k) for X ~ Binomial(n, 1/2): exact in integers up to n = 2000, else summed in logs."""
    if k < 0:
        return 0.0
    if k >= n:
        return 1.0
    if n <= 2000:   # Python's int / int is correctly rounded however large the integers
        return sum(math.comb(n, i) for i in range(k + 1)) / (1 << n)
    i = np.arange(1, k + 1, dtype=np.float64)
    log_comb = np.concatenate([[0.0], np.cumsum(np.log(n - i + 1.0) - np.log(i))])  # log C(n, 0..k)
    top = log_comb.max()
    return float(math.exp(top + math.log(np.exp(log_comb - top).sum()) - n * math.log(2.0)))


def mcnemar_p(b: int, c: int) -> float:
    """Exact two-sided McNemar p-value: the binomial test of b successes in b + c trials at 1/2
    (McNemar 1947; exact form as in Agresti, Categorical Data Analysis, sec. 10.1)."""
    n = b + c
    if n == 0 or b == c:
        return 1.0
    return min(1.0, 2.0 * binomial_half_cdf(min(b, c), n))


def error_difference(wrong_a, wrong_b) -> Paired:
    """Difference in error rate a - b on the same rows (bool arrays: the row was predicted wrongly).

    Interval: Agresti & Min (2005), the Wald interval for matched proportions with 1/2 added to each
    cell of the 2x2 table; p-value: the exact McNemar test on the discordant rows.
    """
    wa, wb = np.asarray(wrong_a, bool), np.asarray(wrong_b, bool)
    n = int(wa.shape[0])
    if n == 0:
        return Paired(float("nan"), (float("nan"), float("nan")), float("nan"), float("nan"), 0, "mcnemar")
    only_a = int(np.count_nonzero(wa & ~wb))   # a wrong, b right
    only_b = int(np.count_nonzero(wb & ~wa))   # b wrong, a right
    diff = (only_a - only_b) / n
    pa, pb = (only_a + 0.5) / (n + 2), (only_b + 0.5) / (n + 2)
    se = math.sqrt(max(0.0, (pa + pb) - (pa - pb) ** 2) / (n + 2))
    centre = pa - pb
    return Paired(diff, (centre - Z95 * se, centre + Z95 * se), se, mcnemar_p(only_a, only_b), n,
                  "exact McNemar; Agresti-Min interval")


# ---------------------------------------------------------------- mean per-row losses

def mean_difference(loss_a, loss_b, weights=None) -> Paired:
    """Difference of mean per-row losses a - b on the same rows (log loss, Brier score, squared or
    absolute error): the normal interval and z-test on the per-row differences.

    weights: per-row weights summing to 1 within strata (balanced error: 1 / (classes x class rows));
    the variance is then the stratified one, sum of w^2 times the spread within the row's stratum,
    strata being the rows of equal weight.
    """
    d = np.asarray(loss_a, np.float64) - np.asarray(loss_b, np.float64)
    n = int(d.shape[0])
    if n == 0:
        return Paired(float("nan"), (float("nan"), float("nan")), float("nan"), float("nan"), 0, "paired normal")
    if weights is None:
        diff = float(d.mean())
        se = float(d.std(ddof=1) / math.sqrt(n)) if n > 1 else float("nan")
    else:
        w = np.asarray(weights, np.float64)
        diff = float(np.dot(w, d))
        var = 0.0
        for wk in np.unique(w):
            dk = d[w == wk]
            if dk.shape[0] > 1:
                var += wk * wk * dk.shape[0] * float(dk.var(ddof=1))
        se = math.sqrt(var)
    z = diff / se if se > 0 else (0.0 if diff == 0 else math.copysign(math.inf, diff))
    return Paired(diff, (diff - Z95 * se, diff + Z95 * se), se, normal_p(z), n, "paired normal")


# ---------------------------------------------------------------- AUC: DeLong

def midranks(x: np.ndarray) -> np.ndarray:
    """Ranks 1..n of x with ties given their mean rank."""
    values, inverse, counts = np.unique(x, return_inverse=True, return_counts=True)
    last = np.cumsum(counts)
    return (last - (counts - 1) / 2.0)[inverse]


def placements(scores: np.ndarray, positive: np.ndarray):
    """DeLong's structural components: V10 for each positive row, V01 for each negative, and the AUC.

    V10_i = share of negatives scored below positive i (ties count 1/2); V01_j = share of positives
    scored above negative j. Computed from midranks (Sun & Xu 2014) in O(n log n).
    """
    s = np.asarray(scores, np.float64)
    pos = np.asarray(positive, bool)
    x, y = s[pos], s[~pos]
    m, n = x.shape[0], y.shape[0]
    tz = midranks(np.concatenate([x, y]))
    v10 = (tz[:m] - midranks(x)) / n
    v01 = 1.0 - (tz[m:] - midranks(y)) / m
    return v10, v01, float(v10.mean())


def auc_difference(scores_a, scores_b, positive) -> Paired:
    """Difference in AUC a - b for two scorings of the same rows: DeLong, DeLong & Clarke-Pearson (1988)."""
    pos = np.asarray(positive, bool)
    m, n = int(pos.sum()), int((~pos).sum())
    if m < 2 or n < 2:
        return Paired(float("nan"), (float("nan"), float("nan")), float("nan"), float("nan"), m + n, "DeLong")
    a10, a01, auc_a = placements(scores_a, pos)
    b10, b01, auc_b = placements(scores_b, pos)
    d10, d01 = a10 - b10, a01 - b01
    var = float(d10.var(ddof=1) / m + d01.var(ddof=1) / n)
    return _z_paired(auc_a - auc_b, var, m + n, "DeLong")


def macro_auc_difference(shares_a, shares_b, y, n_classes: int) -> Paired:
    """Difference in macro one-vs-rest AUC a - b (classes > 2): each class's DeLong components, summed
    per row into the row's influence on the macro mean; the variance is the sum of squared influences
    (for two classes it is DeLong's variance times (m-1)/m and (n-1)/n)."""
    y = np.asarray(y)
    infl = np.zeros(y.shape[0])
    diff, used = 0.0, 0
    for k in range(n_classes):
        pos = y == k
        m, n = int(pos.sum()), int((~pos).sum())
        if m < 1 or n < 1:
            continue
        a10, a01, auc_a = placements(np.asarray(shares_a)[:, k], pos)
        b10, b01, auc_b = placements(np.asarray(shares_b)[:, k], pos)
        dk = auc_a - auc_b
        infl[pos] += (a10 - b10 - dk) / m
        infl[~pos] += (a01 - b01 - dk) / n
        diff += dk
        used += 1
    if used == 0:
        return Paired(float("nan"), (float("nan"), float("nan")), float("nan"), float("nan"), 0, "DeLong (macro)")
    return _z_paired(diff / used, float(np.sum(infl * infl)) / used ** 2, int(y.shape[0]), "DeLong (macro)")


def _z_paired(diff: float, var: float, rows: int, method: str) -> Paired:
    se = math.sqrt(max(var, 0.0))
    z = diff / se if se > 0 else (0.0 if diff == 0 else math.copysign(math.inf, diff))
    return Paired(diff, (diff - Z95 * se, diff + Z95 * se), se, normal_p(z), rows, method)


# ---------------------------------------------------------------- several comparisons

def holm(p_values) -> list[float]:
    """Holm's (1979) step-down adjusted p-values, in the order given (NaN stays NaN, not counted)."""
    p = [float(v) for v in p_values]
    idx = sorted((i for i, v in enumerate(p) if not math.isnan(v)), key=lambda i: p[i])
    k = len(idx)
    out = [float("nan")] * len(p)
    running = 0.0
    for rank, i in enumerate(idx):
        running = max(running, min(1.0, (k - rank) * p[i]))
        out[i] = running
    return out
