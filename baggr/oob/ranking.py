"""Candidates ranked on one measure, each paired with the best on the rows both judged
(baggr.oob.paired), with Holm's adjustment across the comparisons.

A candidate's value and interval are its OOB view's measure (`oob.measures()`: baggr.oob.measures
and, where there is one, the estimate for the kept ensemble of baggr.oob.measure_fit), so they are
the figures `baggr report` gives for that run. The paired tests work on the textbook per-row OOB
outcomes (each row's OOB vote, shares or squared error from the OOB arrays and the rows' targets):
the estimate for the kept ensemble is a figure for the whole table, with no per-row outcome to pair.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from baggr.oob import paired
from baggr.oob.measures import CLASS_MEASURES, HIGHER_IS_BETTER, REGRESSION_MEASURES  # noqa: F401
ALPHA = 0.05     # "close": the Holm-adjusted p-value of the difference to the best is at least this


def default_measure(task: str) -> str:
    return "error" if task == "classes" else "mse"


def check_measure(measure: str, task: str) -> str:
    """The measure, or a ValueError naming those that fit the task."""
    allowed = CLASS_MEASURES if task == "classes" else REGRESSION_MEASURES
    if measure not in allowed:
        raise ValueError(f"measure {measure!r} does not fit a {'class' if task == 'classes' else 'regression'} "
                         f"target (one of {', '.join(allowed)})")
    return measure


@dataclass
class Rows:
    """One candidate's per-row figures for a measure: rows judged, and a loss (or score) per row."""

    covered: np.ndarray          # bool (n,)
    loss: np.ndarray | None      # float (n,) per-row loss (lower is better); None for AUC
    shares: np.ndarray | None    # (n, C) vote shares (AUC)


def smoothed_shares(votes: np.ndarray, n_classes: int) -> np.ndarray:
    """Vote shares (v + 1/2) / (k + C/2) (Krichevsky & Trofimov 1981): never 0, so log loss stays finite."""
    v = np.asarray(votes, np.float64)
    k = v.sum(axis=1, keepdims=True)
    return (v + 0.5) / (k + n_classes / 2.0)


def rows(oob, y: np.ndarray, measure: str) -> Rows:
    """Per-row figures of an OOB view (baggr.oob.OOB) for a measure; y: the rows' targets."""
    a = oob.arrays()
    covered = np.asarray(oob.left_out) > 0
    if oob.task == "classes":
        y = np.asarray(y, np.int64)
        votes = a["votes"]
        C = votes.shape[1]
        if measure in ("error", "balanced-error"):
            return Rows(covered, (a["pred"] != y).astype(np.float64), None)
        if measure == "log-loss":
            p = smoothed_shares(votes, C)
            return Rows(covered, -np.log(p[np.arange(y.shape[0]), y]), None)
        total = votes.sum(axis=1, keepdims=True).astype(np.float64)
        with np.errstate(invalid="ignore", divide="ignore"):
            shares = np.where(total > 0, votes / np.where(total > 0, total, 1.0), 0.0)
        if measure == "brier":   # Brier (1950): the squared distance to the one-hot truth, summed over classes
            onehot = np.zeros_like(shares)
            onehot[np.arange(y.shape[0]), y] = 1.0
            return Rows(covered, np.sum((shares - onehot) ** 2, axis=1), None)
        if measure == "auc":
            return Rows(covered, None, shares)
    else:
        sq = np.asarray(a["sq_err"], np.float64)
        if measure in ("mse", "rmse", "r2"):
            return Rows(covered, sq, None)
        if measure == "mae":
            return Rows(covered, np.sqrt(sq), None)
    raise ValueError(f"unknown measure {measure!r}")


def _weights(y: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Balanced error's row weights: 1 / (classes present x the class's judged rows)."""
    yc = np.asarray(y)[mask]
    counts = np.bincount(yc)
    present = np.count_nonzero(counts)
    return 1.0 / (present * counts[yc])


def value_and_interval(oob, measure: str):
    """(value, 95% interval) of one candidate: its OOB view's figure for the measure (the estimate for
    the kept ensemble where there is one, else the textbook OOB figure)."""
    v, iv = oob.measures().get(measure, (float("nan"), None))
    return float(v), (None if iv is None else (float(iv[0]), float(iv[1])))


def paired_difference(a: Rows, b: Rows, y: np.ndarray, measure: str) -> paired.Paired:
    """Candidate a minus candidate b on the rows both judged, in the measure's units."""
    mask = a.covered & b.covered
    yy = np.asarray(y)[mask]
    if measure == "error":
        return paired.error_difference(a.loss[mask] > 0, b.loss[mask] > 0)
    if measure == "balanced-error":
        return paired.mean_difference(a.loss[mask], b.loss[mask], weights=_weights(y, mask))
    if measure == "auc":
        if a.shares.shape[1] == 2:
            return paired.auc_difference(a.shares[mask, 1], b.shares[mask, 1], yy == 1)
        return paired.macro_auc_difference(a.shares[mask], b.shares[mask], yy, a.shares.shape[1])
    d = paired.mean_difference(a.loss[mask], b.loss[mask])
    if measure == "rmse":   # the MSE's paired test; the difference mapped through the square root at b's MSE
        mb = float(np.mean(b.loss[mask]))
        root = lambda x: math.sqrt(max(mb + x, 0.0)) - math.sqrt(mb)  # noqa: E731
        return paired.Paired(root(d.difference), (root(d.interval[0]), root(d.interval[1])),
                             d.se / (2 * math.sqrt(mb)) if mb > 0 else float("nan"), d.p_value, d.rows, d.method)
    if measure == "r2":    # R2 = 1 - MSE / var(y): a difference in MSE, scaled and turned round
        var_y = float(np.var(np.asarray(yy, np.float64)))
        s = -1.0 / var_y if var_y > 0 else float("nan")
        return paired.Paired(d.difference * s, tuple(sorted((d.interval[0] * s, d.interval[1] * s))), d.se * abs(s),
                             d.p_value, d.rows, d.method)
    return d


def rank(oobs: list, y: np.ndarray, measure: str) -> list[dict]:
    """Every candidate's figures, ranked best first: {index, value, interval, difference,
    difference_interval, p_value (Holm-adjusted), p_raw, rows, method, close}. oobs: OOB views in the
    comparison's order (None: no figures yet, ranked last)."""
    better = -1.0 if measure in HIGHER_IS_BETTER else 1.0
    figs = []
    for i, oob in enumerate(oobs):
        if oob is None:
            figs.append({"index": i, "value": None, "interval": None})
            continue
        r = rows(oob, y, measure)
        v, iv = value_and_interval(oob, measure)
        figs.append({"index": i, "value": v if math.isfinite(v) else None, "interval": iv, "_rows": r})
    order = sorted(range(len(figs)), key=lambda i: (figs[i]["value"] is None,
                                                    better * (figs[i]["value"] or 0.0), i))
    best = figs[order[0]]
    raw = []
    for i in order:
        f = figs[i]
        f.update(difference=None, difference_interval=None, p_raw=None, rows=None, method=None)
        if f is best or f["value"] is None or best["value"] is None:
            raw.append(float("nan"))
            continue
        d = paired_difference(f["_rows"], best["_rows"], y, measure)
        f.update(difference=d.difference, difference_interval=d.interval, p_raw=d.p_value, rows=d.rows,
                 method=d.method)
        raw.append(d.p_value)
    adj = paired.holm(raw)
    out = []
    for i, p in zip(order, adj):
        f = figs[i]
        f.pop("_rows", None)
        f["p_value"] = None if math.isnan(p) else p
        f["close"] = f["p_value"] is not None and f["p_value"] >= ALPHA
        out.append(f)
    return out
