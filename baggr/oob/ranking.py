"""Candidates ranked on one measure of their OOB estimates, each paired with the best on the rows
both judged (baggr.oob.paired), with Holm's adjustment across the comparisons.

The per-row figures come from the OOB arrays (votes, predictions, squared errors) and the rows'
targets. STAND-IN: a candidate's value and interval for measures other than error and MSE are
computed here (a normal interval on the per-row values, DeLong's for AUC) until baggr.oob.measures
(the measures issue) is on main; switch `value_and_interval` to it then.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from baggr.oob import paired
from baggr.oob.intervals import Z95

CLASS_MEASURES = ("error", "balanced-error", "log-loss", "brier", "auc")
REGRESSION_MEASURES = ("mse", "mae", "r2")
HIGHER_IS_BETTER = ("auc", "r2")
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
        if measure in ("mse", "r2"):
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


def _auc(shares: np.ndarray, y: np.ndarray):
    """(AUC, its DeLong standard error): two classes, or the macro one-vs-rest mean."""
    C = shares.shape[1]
    ks = [1] if C == 2 else range(C)
    aucs, var = [], 0.0
    for k in ks:
        pos = y == k
        m, n = int(pos.sum()), int((~pos).sum())
        if m < 2 or n < 2:
            continue
        v10, v01, auc = paired.placements(shares[:, k], pos)
        aucs.append(auc)
        var += v10.var(ddof=1) / m + v01.var(ddof=1) / n   # each class's own; classes taken as independent
    if not aucs:
        return float("nan"), float("nan")
    return float(np.mean(aucs)), math.sqrt(var) / len(aucs)


def value_and_interval(oob, r: Rows, y: np.ndarray, measure: str):
    """(value, 95% interval) of one candidate. Error and MSE: the run's own figures (oob.error and
    oob.interval: the estimate the run reports); the others: STAND-IN, see the module's docstring."""
    if measure in ("error", "mse"):
        iv = oob.interval
        return float(oob.error), (None if iv is None else (float(iv[0]), float(iv[1])))
    mask = r.covered
    if not mask.any():
        return float("nan"), None
    if measure == "auc":
        v, se = _auc(r.shares[mask], np.asarray(y)[mask])
        return v, (v - Z95 * se, v + Z95 * se)
    loss = r.loss[mask]
    if measure == "balanced-error":
        w = _weights(y, mask)
        d = paired.mean_difference(loss, np.zeros_like(loss), weights=w)
    else:
        d = paired.mean_difference(loss, np.zeros_like(loss))
    if measure == "r2":
        var_y = float(np.var(np.asarray(y, np.float64)[mask]))
        if var_y <= 0:
            return float("nan"), None
        return 1.0 - d.difference / var_y, (1.0 - d.interval[1] / var_y, 1.0 - d.interval[0] / var_y)
    return d.difference, d.interval


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
        v, iv = value_and_interval(oob, r, y, measure)
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
