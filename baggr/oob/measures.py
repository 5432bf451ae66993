"""Measures of the OOB predictions beside the error, each with a 95% interval whose method is named.

Every measure is computed over the covered rows only (rows never left out have no OOB
prediction and are excluded, as from the error). Names are spelled as `--measure` spells them.

Classes
- error: share of rows whose OOB class (most votes, ties to the lowest class) is wrong.
  Interval: Wilson (1927) score interval.
- balanced-error: mean over classes of the per-class errors (classes with covered rows).
  Interval: normal, the classes as independent strata: Var = sum_c e_c (1 - e_c) / n_c / C^2.
- log-loss: mean of -log p_y, p_y the row's OOB share of its true class smoothed as
  (v_y + 1/2) / (k + C/2), v_y its votes for that class out of k OOB votes (Krichevsky and
  Trofimov 1981; the Bayes estimate of a share under Jeffreys' prior). Why not clip a share of 0
  at a tiny eps: with hard votes a share is a count out of about 0.37 x members votes, and 0 of
  37 votes says "below about 1/74", not "impossible"; a clip at 1e-15 charges such a row 34.5,
  so the mean would count how many rows hit 0 (more, the fewer the members) rather than measure
  calibration. The smoothing pulls every share slightly toward 1/C (a confident right row with
  k votes costs about C / (2k) instead of 0). Interval: normal, from the per-row losses.
- brier: mean over rows of sum_c (share_c - [y == c])^2 on the raw shares, Brier's (1950)
  definition (0 best, 2 worst; for two classes it is twice the one-class form (p - y)^2).
  Interval: normal, from the per-row scores.
- auc: area under the ROC curve of the share of the second class for two classes; for more,
  the mean over classes of each class's one-vs-rest AUC (macro mean; classes without rows on
  both sides are left out). Ties count one half (the Mann-Whitney U / (n1 n0)). Interval:
  DeLong, DeLong and Clarke-Pearson (1988) for two classes; for more, their placement values
  per class combined through the rows the classes share (the macro mean's influence), normal.

Regression (e: OOB mean minus target)
- mse: mean e^2, normal interval from the per-row squared errors.
- rmse: sqrt(mse); interval: the square roots of the MSE interval's ends (a monotone map).
- mae: mean |e|, normal interval from the per-row absolute errors.
- r2: 1 - mse / Var(y) over the covered rows; interval: delta method (the influence function
  of the ratio), normal.

Per class (classes): precision, recall (Wilson intervals: each is a share of a count fixed by the
rows) and F1, whose interval is a bootstrap over rows (Efron 1979): the confusion counts redrawn
from their multinomial, percentile interval.
"""
from __future__ import annotations

import math

import numpy as np

from baggr.config import CLASS_MEASURES, MEASURES, REGRESSION_MEASURES  # noqa: F401  (the names live there)
from baggr.oob import measure_kernels as k
from baggr.oob.intervals import Z95, normal_mean, wilson

HIGHER_IS_BETTER = frozenset({"auc", "r2"})
LABELS = {"error": "OOB error", "balanced-error": "balanced error", "log-loss": "log loss", "brier": "Brier score",
          "auc": "AUC", "mse": "OOB MSE", "rmse": "RMSE", "mae": "MAE", "r2": "R2"}
METHODS = {
    "error": "Wilson (1927) score interval",
    "balanced-error": "normal, classes as independent strata",
    "log-loss": "normal, from per-row losses",
    "brier": "normal, from per-row scores",
    "auc": "DeLong et al. (1988)",
    "mse": "normal, from per-row squared errors",
    "rmse": "square roots of the MSE interval",
    "mae": "normal, from per-row absolute errors",
    "r2": "delta method, normal",
    "precision": "Wilson (1927) score interval",
    "recall": "Wilson (1927) score interval",
    "f1": "bootstrap over rows (Efron 1979), percentile",
}
BOOTSTRAP_ROUNDS = 2000
MAX_CELLS = 1 << 21     # above this many (k, v) cells, the measures sort the rows instead


def task_measures(task: str) -> tuple:
    return CLASS_MEASURES if task == "classes" else REGRESSION_MEASURES


def _dot(a, b) -> float:
    """sum(a * b) without BLAS (whose threads, on a busy machine, take longer to wake than the sum)."""
    return float(np.sum(np.multiply(a, b)))


def _pair(value, interval):
    value = float(value)
    if not math.isfinite(value):
        return float("nan"), None
    return value, interval


def _normal(total, total_sq, n, lo=None, hi=None):
    iv = normal_mean(total, total_sq, n)
    if iv is None:
        return None
    a, b = iv
    if lo is not None:
        a = max(lo, a)
    if hi is not None:
        b = min(hi, b)
    return (a, b)


# ---------------------------------------------------------------- classes

def class_measures(y, votes, share_bins: int | None = None) -> dict:
    """{name: (value, (lo, hi) or None)} of the class measures; y: int class per row, votes: (n, C)
    OOB votes per row and class (int32 counts, or float64 sums of leaf shares).

    share_bins: for float votes, rank the shares in that many equal bins of [0, 1] instead of
    sorting them (the run's measure curve does, at 65,536 bins: shares within a bin count as tied,
    so the AUC moves by at most half the share of positive-negative pairs that share a bin; the
    report sorts exactly). Hard votes are always exact.
    """
    y = np.ascontiguousarray(y, dtype=np.int32)
    votes = np.ascontiguousarray(votes)
    n_classes = votes.shape[1]
    covered = np.zeros(n_classes, np.int64)
    wrong = np.zeros(n_classes, np.int64)
    cells = None
    if votes.dtype == np.int32:
        kmin, kmax = k.vote_range(votes)
        n_cells = (kmax - kmin + 1) * (kmax + 1)
        if n_cells * max(1, n_classes) <= MAX_CELLS:
            cells = _from_cells(y, votes, int(kmin), int(kmax), covered, wrong)
    if cells is None:
        cells = _from_rows(y, votes, covered, wrong, share_bins)
    (ll_sum, ll_sq), (br_sum, br_sq), auc = cells
    n = int(covered.sum())
    out = {"error": _pair(wrong.sum() / n if n else np.nan, wilson(int(wrong.sum()), n))}
    out["balanced-error"] = _balanced(wrong, covered)
    out["log-loss"] = _pair(ll_sum / n if n else np.nan, _normal(ll_sum, ll_sq, n, lo=0.0))
    out["brier"] = _pair(br_sum / n if n else np.nan, _normal(br_sum, br_sq, n, lo=0.0, hi=2.0))
    out["auc"] = auc
    return out


def _balanced(wrong, covered):
    have = covered > 0
    if not have.any():
        return float("nan"), None
    p = wrong[have] / covered[have]
    c = p.shape[0]
    value = float(p.mean())
    half = Z95 * math.sqrt(float(np.sum(p * (1 - p) / covered[have]))) / c
    return value, (max(0.0, value - half), min(1.0, value + half))


def _auc_classes(n_classes: int) -> list:
    """The classes whose one-vs-rest AUC is computed: the second alone for two classes."""
    return [1] if n_classes == 2 else list(range(n_classes))


def _from_cells(y, votes, kmin, kmax, covered, wrong):
    """Log loss, Brier and AUC sums of hard votes through the (k, v) cell counts."""
    if votes.shape[1] == 2:
        return _two_from_cells(y, votes, kmin, kmax, covered, wrong)
    n_classes = votes.shape[1]
    width = kmax + 1
    n_cells = (kmax - kmin + 1) * width
    which = _auc_classes(n_classes)
    true_cells = np.zeros(n_cells, np.int64)
    rank_cells = np.zeros((len(which), n_cells, 2), np.int64)
    brier = np.zeros(2)
    k.class_cells(y, votes, kmin, width, which[0], true_cells, rank_cells, covered, wrong, brier)
    nz = np.flatnonzero(true_cells)
    cnt = true_cells[nz].astype(np.float64)
    loss = -np.log((nz % width + 0.5) / (kmin + nz // width + 0.5 * n_classes))
    ll = (float(_dot(cnt, loss)), float(_dot(cnt, loss * loss)))
    groups = [_cell_groups(rank_cells[a], kmin, width) for a in range(len(which))]

    def row_groups(a):
        pos, neg, nz, inv = groups[a]
        cell_group = np.full(n_cells, -1, np.int32)
        cell_group[nz] = inv
        kk = votes.sum(axis=1, dtype=np.int64)
        cell = (kk - kmin) * width + votes[:, which[a]]
        return np.where(kk > 0, cell_group[np.clip(cell, 0, n_cells - 1)], -1).astype(np.int32)

    auc = _auc(y, which, [(g[0], g[1]) for g in groups], row_groups)
    return ll, (float(brier[0]), float(brier[1])), auc


def _cell_groups(cells, kmin, width, nz=None):
    """(positives, negatives) per distinct share v / k in ascending order, from (cell, [neg, pos])
    counts; plus the non-empty cells (nz: when already known) and the group of each."""
    if nz is None:
        nz = k.filled_cells(cells)
    values = (nz % width) / (kmin + nz // width)     # equal fractions give equal doubles
    uniq, inv = np.unique(values, return_inverse=True)
    pos = np.bincount(inv, weights=cells[nz, 1], minlength=uniq.shape[0])
    neg = np.bincount(inv, weights=cells[nz, 0], minlength=uniq.shape[0])
    return pos, neg, nz, inv


def _two_from_cells(y, votes, kmin, kmax, covered, wrong):
    """Two classes: every measure from the counts of rows per (k, v_1) cell and class."""
    width = kmax + 1
    cells = np.zeros(((kmax - kmin + 1) * width, 2), np.int64)
    k.two_class_cells(y, votes, kmin, width, cells)
    nz = k.filled_cells(cells)
    kk = (kmin + nz // width).astype(np.float64)
    v1 = (nz % width).astype(np.float64)
    neg, pos = cells[nz, 0].astype(np.float64), cells[nz, 1].astype(np.float64)
    covered[:] = (int(neg.sum()), int(pos.sum()))
    # OOB class 1 needs more votes than class 0 (ties go to class 0)
    wrong[:] = (int(neg[2 * v1 > kk].sum()), int(pos[2 * v1 <= kk].sum()))
    loss1 = -np.log((v1 + 0.5) / (kk + 1.0))
    loss0 = -np.log((kk - v1 + 0.5) / (kk + 1.0))
    ll = (float(_dot(pos, loss1) + _dot(neg, loss0)), float(_dot(pos, loss1 ** 2) + _dot(neg, loss0 ** 2)))
    b1 = 2.0 * (1.0 - v1 / kk) ** 2
    b0 = 2.0 * (v1 / kk) ** 2
    br = (float(_dot(pos, b1) + _dot(neg, b0)), float(_dot(pos, b1 ** 2) + _dot(neg, b0 ** 2)))
    g = _cell_groups(cells, kmin, width, nz)
    return ll, br, _auc(y, [1], [(g[0], g[1])], None)


def _from_rows(y, votes, covered, wrong, share_bins=None):
    """The same from per-row losses and sorted (or binned) shares (votes of any kind, or very many cells)."""
    n = votes.shape[0]
    n_classes = votes.shape[1]
    sums = np.zeros(4)
    k.class_rows(y, votes, sums, covered, wrong)
    ll, br = (float(sums[0]), float(sums[1])), (float(sums[2]), float(sums[3]))
    which = _auc_classes(n_classes)
    if share_bins:
        return ll, br, _binned_auc(y, votes, which, share_bins)
    total = votes.sum(axis=1, dtype=np.float64)
    ok = total > 0
    groups, invs = [], []
    for c in which:
        s = votes[ok, c] / total[ok]
        uniq, inv = np.unique(s, return_inverse=True)
        pos_rows = (y[ok] == c).astype(np.float64)
        groups.append((np.bincount(inv, weights=pos_rows, minlength=uniq.shape[0]),
                       np.bincount(inv, weights=1.0 - pos_rows, minlength=uniq.shape[0])))
        invs.append(inv)

    def row_groups(a):
        g = np.full(n, -1, np.int32)
        g[ok] = invs[a]
        return g

    return ll, br, _auc(y, which, groups, row_groups)


def _binned_auc(y, votes, which, n_bins):
    """The AUC with the shares ranked in n_bins equal bins (see class_measures)."""
    cells = np.zeros((len(which), n_bins, 2), np.int64)
    k.share_bins(y, votes, which[0], cells)
    groups, nzs = [], []
    for a in range(len(which)):
        nz = np.flatnonzero(cells[a, :, 0] + cells[a, :, 1])
        groups.append((cells[a, nz, 1], cells[a, nz, 0]))
        nzs.append(nz)

    def row_groups(a):
        rank = np.full(n_bins, -1, np.int32)
        rank[nzs[a]] = np.arange(nzs[a].shape[0], dtype=np.int32)
        g = np.full(y.shape[0], -1, np.int32)
        total = votes.sum(axis=1, dtype=np.float64)
        ok = total > 0
        s = votes[ok, which[a]] / total[ok]
        g[ok] = rank[np.minimum((s * n_bins).astype(np.int64), n_bins - 1)]
        return g

    return _auc(y, which, groups, row_groups)


def delong(pos, neg):
    """AUC and DeLong's variance from counts of positives and negatives per score group (groups in
    ascending score order). Returns (auc, variance, placement of a positive per group, of a
    negative per group); variance NaN when a side has fewer than two rows.

    DeLong, DeLong and Clarke-Pearson (1988), Biometrics 44: the placement of a positive is the
    share of negatives below it (ties count one half), of a negative the share of positives
    above it; AUC is the mean placement of the positives, and Var = S10 / n1 + S01 / n0 with
    S10, S01 the sample variances of the positives' and the negatives' placements.
    """
    pos = np.asarray(pos, np.float64)
    neg = np.asarray(neg, np.float64)
    n1, n0 = pos.sum(), neg.sum()
    if n1 == 0 or n0 == 0:
        return float("nan"), float("nan"), None, None
    neg_below = np.cumsum(neg) - neg
    pos_above = n1 - np.cumsum(pos)
    place_pos = (neg_below + 0.5 * neg) / n0
    place_neg = (pos_above + 0.5 * pos) / n1
    auc = float(_dot(pos, place_pos) / n1)
    if n1 < 2 or n0 < 2:
        return auc, float("nan"), place_pos, place_neg
    s10 = float(_dot(pos, (place_pos - auc) ** 2)) / (n1 - 1)
    s01 = float(_dot(neg, (place_neg - auc) ** 2)) / (n0 - 1)
    return auc, s10 / n1 + s01 / n0, place_pos, place_neg


def _auc(y, which, groups, row_groups):
    """(value, interval) of the binary AUC or of the macro mean of one-vs-rest AUCs."""
    fits = [delong(pos, neg) for pos, neg in groups]
    keep = [a for a, f in enumerate(fits) if math.isfinite(f[0])]
    if not keep:
        return float("nan"), None
    if len(which) == 1:
        auc, var = fits[0][0], fits[0][1]
    else:
        auc = float(np.mean([fits[a][0] for a in keep]))
        n_a = len(keep)
        width = max(fits[a][2].shape[0] for a in keep)
        place_pos = np.zeros((n_a, width))
        place_neg = np.zeros((n_a, width))
        for i, a in enumerate(keep):
            place_pos[i, : fits[a][2].shape[0]] = fits[a][2]
            place_neg[i, : fits[a][3].shape[0]] = fits[a][3]
        g = np.ascontiguousarray(np.stack([row_groups(a) for a in keep], axis=1))
        theta = np.array([fits[a][0] for a in keep])
        n_pos = np.array([groups[a][0].sum() for a in keep])
        n_neg = np.array([groups[a][1].sum() for a in keep])
        n = float(n_pos[0] + n_neg[0])
        ss = k.class_influence(y, np.array([which[a] for a in keep], np.int64), g, theta, place_pos, place_neg,
                               n_pos, n_neg)
        var = ss * n / (n - 1) if n > 1 else float("nan")
    if not math.isfinite(var):
        return auc, None
    half = Z95 * math.sqrt(var)
    return auc, (max(0.0, auc - half), min(1.0, auc + half))


def class_table(confusion, *, rounds: int = BOOTSTRAP_ROUNDS, seed: int = 0) -> dict:
    """Per-class precision, recall and F1 from the confusion counts (rows: true class, columns: OOB
    class): {"precision": [(value, interval), ...], "recall": [...], "f1": [...]}; NaN where undefined.

    F1's interval redraws the confusion counts from their multinomial (a bootstrap over the rows,
    which enter F1 only through these counts), `rounds` times from a fixed seed (a report gives
    the same interval every time it is made).
    """
    cm = np.asarray(confusion, dtype=np.int64)
    n_classes = cm.shape[0]
    tp = np.diag(cm)
    predicted, actual = cm.sum(axis=0), cm.sum(axis=1)
    out = {"precision": [], "recall": [], "f1": []}
    for c in range(n_classes):
        out["precision"].append(_pair(tp[c] / predicted[c] if predicted[c] else np.nan,
                                      wilson(int(tp[c]), int(predicted[c]))))
        out["recall"].append(_pair(tp[c] / actual[c] if actual[c] else np.nan, wilson(int(tp[c]), int(actual[c]))))
    f1 = _f1(tp, predicted, actual)
    n = int(cm.sum())
    boot = None
    if n > 0 and rounds > 0:
        rng = np.random.default_rng(seed)
        draws = rng.multinomial(n, (cm / n).ravel(), size=rounds).reshape(rounds, n_classes, n_classes)
        btp = np.diagonal(draws, axis1=1, axis2=2)
        boot = _f1(btp, draws.sum(axis=1), draws.sum(axis=2))
    for c in range(n_classes):
        iv = None
        if boot is not None and math.isfinite(f1[c]):
            b = boot[:, c]
            b = b[np.isfinite(b)]
            if b.shape[0]:
                lo, hi = np.quantile(b, [0.025, 0.975])
                iv = (float(lo), float(hi))
        out["f1"].append(_pair(f1[c], iv))
    return out


def _f1(tp, predicted, actual):
    """F1 = 2 tp / (predicted + actual), the harmonic mean of precision and recall; NaN where 0/0."""
    tp = np.asarray(tp, np.float64)
    d = np.asarray(predicted, np.float64) + np.asarray(actual, np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(d > 0, 2.0 * tp / np.where(d > 0, d, 1.0), np.nan)


# ---------------------------------------------------------------- regression

def regression_measures(y, value_sum, left_out) -> dict:
    """{name: (value, interval)} of the regression measures from each row's OOB value sum and count."""
    y = np.ascontiguousarray(y, dtype=np.float64)
    value_sum = np.ascontiguousarray(value_sum, dtype=np.float64)
    left_out = np.ascontiguousarray(left_out, dtype=np.int32)
    n, se, se2, ae, sy, syy = (float(v) for v in k.regression_sums(y, value_sum, left_out))
    out = {}
    if n == 0:
        return {name: (float("nan"), None) for name in REGRESSION_MEASURES}
    mse = se / n
    mse_iv = _normal(se, se2, n, lo=0.0)
    out["mse"] = _pair(mse, mse_iv)
    out["rmse"] = _pair(math.sqrt(mse), None if mse_iv is None else (math.sqrt(mse_iv[0]), math.sqrt(mse_iv[1])))
    out["mae"] = _pair(ae / n, _normal(ae, se, n, lo=0.0))
    mean_y = sy / n
    var_y = syy / n - mean_y * mean_y
    if n < 2 or not var_y > 0:
        out["r2"] = (float("nan"), None)
        return out
    r2 = 1.0 - mse / var_y
    ss = k.r2_influence(y, value_sum, left_out, mse, mean_y, var_y)
    half = Z95 * math.sqrt(ss / (n * (n - 1)))
    out["r2"] = _pair(r2, (r2 - half, min(1.0, r2 + half)))
    return out


# ---------------------------------------------------------------- from an OOB view

def of_oob(oob) -> dict:
    """All measures of a run's OOB view (baggr.oob.view.OOB), as {name: (value, interval)}."""
    a = oob.arrays()
    if "target" not in a:   # a model file written before the targets were stored beside the votes
        return {}
    if oob.task == "classes":
        return class_measures(a["target"], a["votes"])
    return regression_measures(a["target"], a["value_sum"], oob.left_out)
