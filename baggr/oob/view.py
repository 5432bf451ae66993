"""The OOB results of a run, as a read-only view over the tally's arrays (what `ensemble.oob` is)."""
from __future__ import annotations

import numpy as np

from baggr.oob.curve import Fit
from baggr.oob.intervals import normal_mean, wilson


class OOB:
    """Out-of-bag figures: each row judged only by the members whose draw left it out.

    Each row's OOB vote comes from about 0.37 x members trees, so the textbook OOB error after b
    members (`raw_curve`) reads high: it is the error of an ensemble of about 0.37 b members
    (Bylander 2002; Janitza & Hornung 2018). `curve`, `error` and `interval` estimate the error of
    the kept b-member ensemble itself (baggr/oob/curve.py), `error_limit` that of an unlimited one.
    """

    def __init__(self, task: str, classes: list, arrays: dict):
        self.task, self.classes, self._a = task, list(classes), arrays
        # the ensemble's own fit (final_*), or in a checkpoint the run's latest refit (est_*)
        fit = {k[6:]: v for k, v in arrays.items() if k.startswith("final_")} or \
            {k[4:]: v for k, v in arrays.items() if k.startswith("est_") and k != "est_needed"}
        self._fit = Fit.from_arrays(task, fit) if fit else None

    @classmethod
    def from_tally(cls, tally, classes, extra: dict | None = None) -> "OOB":
        """The figures of the tallies as they stand; the tally's arrays are kept whole (with the run's
        latest refit, est_*), so the ensemble can be grown on bit for bit. extra: more arrays to keep."""
        arrays = {k: np.array(v, copy=True) for k, v in tally.arrays().items()}
        if tally.task == "classes":
            arrays["class_rows"] = tally.class_rows.copy()
        if tally.members > 0:
            arrays.update({"final_" + k: v for k, v in tally.fit().arrays().items()})
        arrays.update(extra or {})
        return cls(tally.task, classes, arrays)

    @property
    def corrected(self) -> bool:
        """Whether the figures are the estimate for the kept ensemble (False: a model file written
        before the estimate existed; curve and error are then the raw OOB figures)."""
        return self._fit is not None

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
    def _sizes(self) -> np.ndarray:
        return np.arange(1, self.members + 1, dtype=np.int64)

    def _cached(self, name, make):
        c = self.__dict__.setdefault("_cache", {})
        if name not in c:
            c[name] = make()
        return c[name]

    @property
    def curve(self) -> np.ndarray:
        """Estimated error (MSE for regression) of the kept b-member ensemble, b = 1..M."""
        if self._fit is None:
            return self.raw_curve
        return self._cached("curve", lambda: self._fit.at(self._sizes()))

    @property
    def curve_interval(self) -> np.ndarray:
        """(M, 2) 95% interval of the curve."""
        if self._fit is None:
            return self.raw_curve_interval
        return self._cached("curve_interval", lambda: self._intervals(self.curve, self._fit.var_at(self._sizes())))

    def _intervals(self, e, v) -> np.ndarray:
        out = np.full((e.shape[0], 2), np.nan)
        for i, (a, b) in enumerate(zip(e.tolist(), v.tolist())):
            iv = self._fit.interval(a, b)
            if iv is not None:
                out[i] = iv
        return out

    @property
    def raw_curve(self) -> np.ndarray:
        """The textbook OOB error after 1, 2, ..., M members (each row voted on by its OOB members)."""
        return self._a["curve"]

    @property
    def raw_curve_interval(self) -> np.ndarray:
        return self._a["curve_interval"]

    @property
    def error(self) -> float:
        """Estimated error of the kept ensemble (all M members)."""
        return float(self.curve[-1]) if self.curve.shape[0] else float("nan")

    @property
    def interval(self):
        if self._fit is not None:
            if self.members == 0:
                return None
            iv = self.curve_interval[-1]
            return None if np.isnan(iv[0]) else (float(iv[0]), float(iv[1]))
        return self.raw_interval

    @property
    def variance(self) -> float:
        """Variance of `error` (over the sampling of rows) that the interval is built on."""
        if self._fit is None or self.members == 0:
            return float("nan")
        return float(self._fit.var_at(self.members)[0])

    @property
    def raw_error(self) -> float:
        return float(self.raw_curve[-1]) if self.raw_curve.shape[0] else float("nan")

    @property
    def raw_interval(self):
        if self.task == "classes":
            return wilson(int(self._a["totals"][0]), int(self._a["totals"][1]))
        s = self._a["sums"]
        return normal_mean(float(s[0]), float(s[1]), float(s[2]))

    @property
    def error_limit(self) -> float:
        """Estimated error of an unlimited ensemble (NaN where not estimated)."""
        return self._fit.limit if self._fit is not None else float("nan")

    @property
    def error_limit_interval(self):
        return self._fit.limit_interval if self._fit is not None else None

    @property
    def members_needed(self) -> int | None:
        """Fewest members whose estimated error lies within tolerance of error_limit: 1% of it or
        (classes) 0.1 percentage point, the larger. None: not estimated, or beyond 4 million."""
        return self._fit.members_needed() if self._fit is not None else None

    @property
    def tolerance(self) -> float:
        return self._fit.tolerance() if self._fit is not None else float("nan")

    def figures(self, target: int | None = None, measure: str | None = None) -> dict:
        """The estimate as a run's journal carries it: error, interval, error_limit(_interval),
        members_needed, class_error and the curve over sizes (empty without an estimate); with a
        measure other than the error (MSE), also measure_estimate: that measure's."""
        f = self._fit
        if f is None or self.members == 0:
            return {}
        out = {"error": self.error, "interval": self.interval, "error_limit": f.limit,
               "error_limit_interval": f.limit_interval, "members_needed": f.members_needed(),
               "curve": f.points(f.points_top(target or self.members, self.members))}
        if self.task == "classes":
            out["class_error"] = self.class_error.tolist()
        mf = self.measure_fits().get(measure) if measure not in (None, "error", "mse") else None
        if mf is not None:
            out["measure_estimate"] = dict(self.measure_estimate(measure), name=measure,
                                           curve=mf.points(mf.points_top(target or self.members, self.members)))
        return out

    def estimate_at(self, b: int) -> tuple:
        """(estimate, 95% interval) for an ensemble of b members (any b >= 1, also beyond M)."""
        if self._fit is None:
            raise AttributeError("this model file holds no estimated curve (written by an older baggr)")
        e, v = float(self._fit.at(b)[0]), float(self._fit.var_at(b)[0])
        return e, self._fit.interval(e, v)

    @property
    def class_curve(self) -> np.ndarray:
        """(M, C) per-class estimated error of the kept b-member ensemble (classes only)."""
        self._need_classes()
        if self._fit is None:
            return self.raw_class_curve
        return self._cached("class_curve", lambda: self._fit.class_at(self._sizes()))

    @property
    def raw_class_curve(self) -> np.ndarray:
        self._need_classes()
        return self._a["class_curve"]

    @property
    def class_error(self) -> np.ndarray:
        self._need_classes()
        if self._fit is not None:
            return self.class_curve[-1] if self.members else np.full(len(self.classes), np.nan)
        return self.raw_class_error

    @property
    def raw_class_error(self) -> np.ndarray:
        self._need_classes()
        w, c = self._a["class_wrong"], self._a["class_covered"]
        return np.where(c > 0, w / np.maximum(c, 1), np.nan)

    @property
    def class_interval(self) -> list:
        self._need_classes()
        if self._fit is not None and self.members:
            m = self.members
            e, v = self._fit.class_at(m)[0], self._fit.class_var_at(m)[0]
            return [self._fit.interval(float(a), float(b)) for a, b in zip(e, v)]
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
        """1 - MSE / variance of the covered rows' targets (regression only), with the MSE the estimate
        for the kept ensemble (`error`); raw_r2 the textbook one."""
        if self.task != "regression":
            raise AttributeError("r2 is a regression figure")
        if self._fit is None:
            return self.raw_r2
        s = self._a["sums"]
        n = s[2]
        if n < 2:
            return float("nan")
        var = s[4] / n - (s[3] / n) ** 2
        return float(1.0 - self.error / var) if var > 0 else float("nan")

    @property
    def raw_r2(self) -> float:
        """1 - the textbook OOB MSE / variance of the covered rows' targets."""
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
        """Every measure with its 95% interval, {name: (value, (lo, hi) or None)}, named as --measure
        spells them: the estimate for the kept ensemble (baggr/oob/measure_fit.py) where there is one,
        else the textbook figure (raw_measures); the error (MSE) is this view's own `error`."""
        from baggr.oob.measure_curve import follow_estimate
        out = dict(self.raw_measures())
        for name, fit in self.measure_fits().items():
            e, v = fit.point(self.members)
            out[name] = (e, fit.interval(e, v))
        return follow_estimate(out, self.task, self.error, self.interval)

    def raw_measures(self) -> dict:
        """The textbook OOB figure of every measure (each row judged by its OOB votes), with its interval."""
        from baggr.oob.measures import of_oob
        return self._cached("raw_measures", lambda: of_oob(self))

    def measure_fits(self) -> dict:
        """{name: baggr.oob.curve.Fit} of every measure with an estimate for the kept ensemble."""
        from baggr.oob import measure_fit
        return self._cached("measure_fits", lambda: measure_fit.of_oob(self))

    def measure_estimate(self, name: str) -> dict | None:
        """The estimate of one measure: value and interval at M, its limit (b -> oo) with interval,
        members_needed and tolerance; None where the measure has no estimate (the textbook figure stands)."""
        fit = self._fit if name in ("error", "mse") else self.measure_fits().get(name)
        if fit is None or self.members == 0:
            return None
        e, v = fit.point(self.members)
        return {"value": e, "interval": fit.interval(e, v), "limit": fit.limit, "limit_interval": fit.limit_interval,
                "members_needed": fit.members_needed(), "tolerance": fit.tolerance()}

    def measure_curve(self, name: str) -> tuple:
        """(values (M,), intervals (M, 2)) of one measure's estimate for b = 1..M members (NaN where none)."""
        fit = self._fit if name in ("error", "mse") else self.measure_fits().get(name)
        m = self.members
        if fit is None:
            return np.full(m, np.nan), np.full((m, 2), np.nan)
        b = self._sizes()
        e = fit.at(b)
        v = fit.var_at(b)
        iv = np.full((m, 2), np.nan)
        for i, (x, w) in enumerate(zip(e.tolist(), v.tolist())):
            t = fit.interval(x, w)
            if t is not None:
                iv[i] = t
        return e, iv

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
             "raw_error": _f(self.raw_error),
             "raw_interval": None if self.raw_interval is None else [_f(v) for v in self.raw_interval],
             "error_limit": _f(self.error_limit),
             "error_limit_interval": None if self.error_limit_interval is None
             else [_f(v) for v in self.error_limit_interval],
             "members_needed": self.members_needed,
             "coverage": self.coverage, "uncovered": self.uncovered}
        if self.task == "classes":
            d["classes"] = self.classes
            d["class_error"] = [_f(v) for v in self.class_error]
            d["raw_class_error"] = [_f(v) for v in self.raw_class_error]
            d["class_rows"] = [int(v) for v in self.class_rows]
            d["confusion"] = self.confusion.tolist()
        else:
            d["r2"] = _f(self.r2)
            d["raw_r2"] = _f(self.raw_r2)
        return d


def _f(v):
    v = float(v)
    return None if v != v else v
