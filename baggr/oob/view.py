"""The OOB results of a run, as a read-only view over the tally's arrays (what `ensemble.oob` is)."""
from __future__ import annotations

import numpy as np

from baggr.oob.intervals import normal_mean, wilson


class OOB:
    """Out-of-bag figures: each row judged only by the members whose draw left it out.

    Caution: with few members each row is judged by about 0.37 x members trees, so a small
    ensemble's OOB error reads high (Bylander 2002; Janitza & Hornung 2018); read the curve's tail.
    """

    def __init__(self, task: str, classes: list, arrays: dict):
        self.task, self.classes, self._a = task, list(classes), arrays

    @classmethod
    def from_tally(cls, tally, classes) -> "OOB":
        arrays = {k: np.array(v, copy=True) for k, v in tally.arrays().items()}
        if tally.task == "classes":
            arrays["class_rows"] = tally.class_rows.copy()
        return cls(tally.task, classes, arrays)

    def arrays(self) -> dict:
        return self._a

    # -- sizes -----------------------------------------------------------------------------------
    @property
    def members(self) -> int:
        return int(self._a["members"][0])

    @property
    def left_out(self) -> np.ndarray:
        """Times each row was out of bag."""
        return self._a["left_out"]

    @property
    def covered(self) -> int:
        return int(np.count_nonzero(self.left_out))

    @property
    def uncovered(self) -> int:
        """Rows never left out: counted here, excluded from the error."""
        return int(self.left_out.shape[0] - self.covered)

    @property
    def coverage(self) -> float:
        n = self.left_out.shape[0]
        return self.covered / n if n else 0.0

    # -- the estimate ----------------------------------------------------------------------------
    @property
    def curve(self) -> np.ndarray:
        """OOB error after 1, 2, ..., M members (MSE for regression)."""
        return self._a["curve"]

    @property
    def curve_interval(self) -> np.ndarray:
        """(M, 2) 95% interval of the curve."""
        return self._a["curve_interval"]

    @property
    def error(self) -> float:
        return float(self.curve[-1]) if self.curve.shape[0] else float("nan")

    @property
    def interval(self):
        if self.task == "classes":
            return wilson(int(self._a["totals"][0]), int(self._a["totals"][1]))
        s = self._a["sums"]
        return normal_mean(float(s[0]), float(s[1]), float(s[2]))

    @property
    def class_curve(self) -> np.ndarray:
        """(M, C) per-class OOB error after each member (classes only)."""
        self._need_classes()
        return self._a["class_curve"]

    @property
    def class_error(self) -> np.ndarray:
        self._need_classes()
        w, c = self._a["class_wrong"], self._a["class_covered"]
        return np.where(c > 0, w / np.maximum(c, 1), np.nan)

    @property
    def class_interval(self) -> list:
        self._need_classes()
        return [wilson(int(w), int(c)) for w, c in zip(self._a["class_wrong"], self._a["class_covered"])]

    @property
    def class_rows(self) -> np.ndarray:
        self._need_classes()
        return self._a["class_rows"]

    @property
    def confusion(self) -> np.ndarray:
        """Counts over covered rows: true class by row, OOB predicted class by column."""
        self._need_classes()
        return self._a["confusion"]

    @property
    def r2(self) -> float:
        """1 - MSE / variance of the covered rows' targets (regression only)."""
        if self.task != "regression":
            raise AttributeError("r2 is a regression figure")
        s = self._a["sums"]
        n = s[2]
        if n < 2:
            return float("nan")
        var = s[4] / n - (s[3] / n) ** 2
        return float(1.0 - (s[0] / n) / var) if var > 0 else float("nan")

    # -- per row ---------------------------------------------------------------------------------
    @property
    def prediction(self) -> np.ndarray:
        """Each row's OOB prediction: a class label (None where never out of bag) or a mean (NaN)."""
        if self.task == "classes":
            labels = np.array(self.classes + [None], dtype=object)
            return labels[self._a["pred"]]  # -1 picks the trailing None
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(self.left_out > 0, self._a["value_sum"] / np.maximum(self.left_out, 1), np.nan)

    @property
    def shares(self) -> np.ndarray:
        """(n, C) share of each row's OOB votes per class (NaN where never out of bag)."""
        self._need_classes()
        v = self._a["votes"].astype(np.float64)
        total = v.sum(axis=1, keepdims=True)
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(total > 0, v / np.where(total > 0, total, 1), np.nan)

    # -- measures and importance (baggr.oob.measures, baggr.oob.importance) ------------------------
    def measures(self) -> dict:
        """Every measure of the OOB predictions with its 95% interval, {name: (value, (lo, hi) or None)},
        named as --measure spells them; the error (MSE) is this view's own `error` and `interval`."""
        from baggr.oob.measure_curve import follow_estimate
        from baggr.oob.measures import of_oob
        return follow_estimate(of_oob(self), self.task, self.error, self.interval)

    @property
    def importance(self) -> dict | None:
        """Feature importance of a run trained with importance=True (None otherwise): {"permutation":
        [{feature, mean, se}], "class_permutation": {class: [...]}, "impurity": [...], "members": M}."""
        from baggr.oob.importance import summary
        if "imp_sum" not in self._a:
            return None
        names = self.features or [f"x{j}" for j in range(self._a["imp_sum"].shape[0])]
        return summary(self._a, names, self.classes if self.task == "classes" else None)

    features: list | None = None   # the feature names, set by the Ensemble

    def _need_classes(self):
        if self.task != "classes":
            raise AttributeError("this is a regression ensemble: it has no classes")

    def summary(self) -> dict:
        """JSON-able figures for reports and the model header."""
        d = {"task": self.task, "members": self.members, "error": _f(self.error),
             "interval": None if self.interval is None else [_f(v) for v in self.interval],
             "coverage": self.coverage, "uncovered": self.uncovered}
        if self.task == "classes":
            d["classes"] = self.classes
            d["class_error"] = [_f(v) for v in self.class_error]
            d["class_rows"] = [int(v) for v in self.class_rows]
            d["confusion"] = self.confusion.tolist()
        else:
            d["r2"] = _f(self.r2)
        return d


def _f(v):
    v = float(v)
    return None if v != v else v
