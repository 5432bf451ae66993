"""Feature importance: OOB permutation importance (Breiman 2001, section 10) and the impurity
decrease the nodes give for free, per member, folded in member order.

Permutation: for member m and feature f, f's codes are permuted among m's OOB rows (a stream of
its own from (seed, m): the same on any thread count, cluster or resume) and the rows sent down
m's tree again; the rise in m's OOB error (share of rows wrong, or MSE) is f's importance in m,
overall and over the rows of each class. Reported: the mean over members and its standard
error (sd / sqrt(members)).

Impurity decrease: per member, the sum over f's splits of the weighted impurity decrease,
w(v) i(v) - w(l) i(l) - w(r) i(r), as a share of the root's draw weight. It rates features by
the in-bag rows and is biased toward features with many distinct values (Strobl, Boulesteix,
Zeileis and Hothorn 2007): read it beside the permutation importance, not instead.

Both describe what the model uses, not cause and effect; correlated features share importance.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from baggr.errors import ModelFileError
from baggr.learn.rng import STREAM_IMPORTANCE, stream_state
from baggr.oob import importance_kernels as k

CAUTIONS = (
    "Importance describes the model, not cause and effect: a feature the model leans on need not "
    "drive the outcome, and changing it need not change the outcome.",
    "Correlated features share their importance: each can look weak while the group matters, "
    "because the members find the same information in the others.",
    "The impurity decrease favours features with many distinct values (Strobl et al. 2007); the "
    "permutation importance on OOB rows does not share that bias.",
)


@dataclass
class MemberImportance:
    """One member's importance figures (its contribution to the ImportanceTally)."""

    rows: int                 # the member's OOB rows
    class_rows: np.ndarray    # int64 (C,) of them per class (empty for regression)
    rise: np.ndarray          # float64 (p,) rise in the member's OOB error with f permuted
    class_rise: np.ndarray    # float64 (p, C) the same over each class's rows (NaN: none of that class)
    decrease: np.ndarray      # float64 (p,) impurity decrease, share of the root's draw weight


def member_importance(codes, tree, oob_rows, y_class, y_value, regression: bool, n_classes: int, seed: int,
                      member: int) -> MemberImportance:
    """Member `member`'s importance figures from its tree and OOB rows (codes: (p, n) uint8)."""
    p = codes.shape[0]
    c = 0 if regression else n_classes
    delta = np.zeros(p)
    class_delta = np.zeros((p, c))
    rows = np.ascontiguousarray(oob_rows, np.int32)
    k.permutation_rises(codes, rows, y_class, y_value, bool(regression), int(max(n_classes, 1)), tree.left,
                        tree.right, tree.feature, tree.threshold, tree.is_cat, tree.missing_left,
                        np.asarray(tree.cat_masks, np.uint64).reshape(-1, 4), tree.value,
                        stream_state(seed, member, STREAM_IMPORTANCE), delta, class_delta)
    n = rows.shape[0]
    if regression:
        class_rows = np.zeros(0, np.int64)
        class_rise = np.zeros((p, 0))
    else:
        class_rows = np.bincount(y_class[rows], minlength=n_classes).astype(np.int64)
        with np.errstate(invalid="ignore", divide="ignore"):
            class_rise = np.where(class_rows > 0, class_delta / np.maximum(class_rows, 1), np.nan)
    rise = delta / n if n else np.full(p, np.nan)
    return MemberImportance(n, class_rows, rise, class_rise, impurity_decrease(tree, p))


def impurity_decrease(tree, p: int) -> np.ndarray:
    """Per feature, the summed weighted impurity decrease of its splits over the root's draw weight."""
    left, right = np.asarray(tree.left), np.asarray(tree.right)
    inner = np.flatnonzero(left >= 0)
    if inner.shape[0] == 0:
        return np.zeros(p)
    w = np.asarray(tree.weight, np.float64)
    imp = np.asarray(tree.impurity, np.float64)
    l, r = left[inner], right[inner]
    dec = w[inner] * imp[inner] - w[l] * imp[l] - w[r] * imp[r]
    return np.bincount(np.asarray(tree.feature)[inner], weights=dec, minlength=p) / w[0]


class ImportanceTally:
    """Sums over members of the importance figures, folded in member order (so the same everywhere)."""

    NAMES = ("imp_members", "imp_sum", "imp_sq", "imp_class_members", "imp_class_sum", "imp_class_sq",
             "imp_decrease_members", "imp_decrease_sum", "imp_decrease_sq")

    def __init__(self, n_features: int, n_classes: int):
        p, c = n_features, n_classes
        self.a = {"imp_members": np.zeros(1, np.int64), "imp_sum": np.zeros(p), "imp_sq": np.zeros(p),
                  "imp_class_members": np.zeros(c, np.int64), "imp_class_sum": np.zeros((p, c)),
                  "imp_class_sq": np.zeros((p, c)), "imp_decrease_members": np.zeros(1, np.int64),
                  "imp_decrease_sum": np.zeros(p), "imp_decrease_sq": np.zeros(p)}

    def fold(self, mi: MemberImportance) -> None:
        a = self.a
        a["imp_decrease_members"][0] += 1
        a["imp_decrease_sum"] += mi.decrease
        a["imp_decrease_sq"] += mi.decrease * mi.decrease
        if mi.rows == 0:
            return
        a["imp_members"][0] += 1
        a["imp_sum"] += mi.rise
        a["imp_sq"] += mi.rise * mi.rise
        have = mi.class_rows > 0
        if have.any():
            a["imp_class_members"] += have
            a["imp_class_sum"][:, have] += mi.class_rise[:, have]
            a["imp_class_sq"][:, have] += mi.class_rise[:, have] ** 2

    def arrays(self) -> dict:
        return {name: v.copy() for name, v in self.a.items()}

    def latest(self) -> dict:
        """The permutation importance so far, {"mean": [...], "se": [...]} per feature (for the journal)."""
        mean, se = _mean_se(self.a["imp_sum"], self.a["imp_sq"], int(self.a["imp_members"][0]))
        return {"mean": [_num(v) for v in mean], "se": [_num(v) for v in se]}

    def restore(self, arrays: dict) -> None:
        check_arrays(arrays, "checkpoint", self.a["imp_sum"].shape[0], self.a["imp_class_members"].shape[0])
        for name in self.NAMES:
            self.a[name][...] = arrays[name]


def check_arrays(a: dict, where, p: int | None = None, c: int | None = None) -> None:
    """ModelFileError unless the importance arrays (when any is present) are whole and consistent."""
    have = [name in a for name in ImportanceTally.NAMES]
    if not any(have):
        return
    if not all(have):
        raise ModelFileError(f"{where}: the importance figures are incomplete")
    p = a["imp_sum"].shape[0] if p is None else p
    c = a["imp_class_members"].shape[0] if c is None else c
    shapes = {"imp_members": (1,), "imp_sum": (p,), "imp_sq": (p,), "imp_class_members": (c,),
              "imp_class_sum": (p, c), "imp_class_sq": (p, c), "imp_decrease_members": (1,),
              "imp_decrease_sum": (p,), "imp_decrease_sq": (p,)}
    for name, shape in shapes.items():
        x = a[name]
        kind = "i" if name.endswith("members") else "f"
        if x.shape != shape or x.dtype.kind != kind:
            raise ModelFileError(f"{where}: importance array '{name}' has the wrong type or shape")


def _mean_se(total, sq, n):
    """Mean and standard error of the mean from a sum, a sum of squares and a count."""
    total, sq = np.asarray(total, np.float64), np.asarray(sq, np.float64)
    n = np.asarray(n, np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(n > 0, total / np.maximum(n, 1), np.nan)
        var = np.where(n > 1, np.maximum(sq / np.maximum(n, 1) - mean * mean, 0.0) * n / np.maximum(n - 1, 1), np.nan)
        se = np.sqrt(var / np.maximum(n, 1))
    return mean, se


def summary(arrays: dict, features, classes=None) -> dict | None:
    """The importance of a run as JSON-able lists (None when the run did not measure it):
    {"permutation": [{feature, mean, se}], "class_permutation": {class: [{feature, mean, se}]},
    "impurity": [{feature, mean, se}], "members": M}, each list in the features' order."""
    if "imp_sum" not in arrays:
        return None
    m = int(arrays["imp_members"][0])
    mean, se = _mean_se(arrays["imp_sum"], arrays["imp_sq"], m)
    out = {"members": m, "permutation": _rows(features, mean, se)}
    dmean, dse = _mean_se(arrays["imp_decrease_sum"], arrays["imp_decrease_sq"], int(arrays["imp_decrease_members"][0]))
    out["impurity"] = _rows(features, dmean, dse)
    if classes:
        cm = arrays["imp_class_members"]
        out["class_permutation"] = {}
        for j, name in enumerate(classes):
            cmean, cse = _mean_se(arrays["imp_class_sum"][:, j], arrays["imp_class_sq"][:, j], cm[j])
            out["class_permutation"][str(name)] = _rows(features, cmean, cse)
    return out


def _num(v):
    v = float(v)
    return v if math.isfinite(v) else None


def _rows(features, mean, se) -> list:
    return [{"feature": str(f), "mean": _num(a), "se": _num(b)} for f, a, b in zip(features, mean, se)]
