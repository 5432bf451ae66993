"""Running OOB tallies: every member's OOB votes folded in member order, the curve kept for every size."""
from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np

from baggr.oob import curve as est
from baggr.oob import measure_fit
from baggr.oob import tally_kernels as k
from baggr.oob.intervals import normal_mean, wilson


@dataclass
class MemberDelta:
    """What one member adds to the tallies: its OOB rows and the votes (or values) it casts for them."""

    member: int
    rows: np.ndarray    # int32 OOB rows
    votes: np.ndarray   # classes: int32 class per row (hard votes), or (len(rows), C) float64 shares or
                        # int32 one-hot; regression: float64 (len(rows),)


class Tally:
    """OOB tallies of the members folded so far, updated in O(OOB rows) per member.

    The curve kept here is the textbook OOB error after each member (the raw curve). The
    estimated error of the kept ensemble (baggr/oob/curve.py) is refitted from the tallies after
    the members where curve.refit_due says so and read at the current size in between; `est`
    holds the latest fit (it is part of a checkpoint, so a resumed run reads the same figures).
    """

    ARRAYS = ("votes", "pred", "left_out", "confusion", "class_wrong", "class_covered", "totals",
              "value_sum", "value_m2", "sq_err", "sums", "curve", "class_curve", "curve_interval")

    def __init__(self, task: str, y: np.ndarray, n_classes: int, vote: str, capacity: int):
        self.task, self.y, self.n_classes, self.vote = task, y, n_classes, vote
        n = y.shape[0]
        self.members = 0
        # hard votes count one per OOB vote: times left out and OOB class follow from them, so
        # they are not stored (two int32 per row less on a large table), only derived when read
        self._derived = task == "classes" and vote == "hard"
        self._left_out = np.zeros(0 if self._derived else n, np.int32)
        if task == "classes":
            self.votes = np.zeros((n, n_classes), np.int32 if vote == "hard" else np.float64)
            self._pred = np.full(0 if self._derived else n, -1, np.int32)
            self.confusion = np.zeros((n_classes, n_classes), np.int64)
            self.class_wrong = np.zeros(n_classes, np.int64)
            self.class_covered = np.zeros(n_classes, np.int64)
            self.totals = np.zeros(2, np.int64)
            self.class_rows = np.bincount(y, minlength=n_classes).astype(np.int64)
            self.class_curve = np.full((capacity, n_classes), np.nan)
            self._no_votes = np.zeros((0, n_classes), self.votes.dtype)
            self._no_class = np.zeros(0, np.int32)
        else:
            self.value_sum = np.zeros(n, np.float64)
            self.value_m2 = np.zeros(n, np.float64)
            self.sq_err = np.zeros(n, np.float64)
            self.sums = np.zeros(5, np.float64)
        self.curve = np.full(capacity, np.nan)
        self.curve_interval = np.full((capacity, 2), np.nan)
        self.est: est.Fit | None = None
        self.live_fits = True   # False: nobody reads figures between members, so skip the refits
        self.measure = ""       # the measure the run is judged by (set by the training): its estimate is
                                # refitted beside the error's, and `needed` follows it
        self.mest: est.Fit | None = None   # the latest refit of that measure (None: error / MSE, or none yet)
        self.needed: list = []  # [member, members_needed or -1] of every refit, for a stopping rule
        self.refit_seconds = 0.0  # time the refits took (bench/curve_cost.py reads it)

    @property
    def left_out(self) -> np.ndarray:
        """int32 times each row was out of bag."""
        if self._derived:
            return self.votes.sum(axis=1, dtype=np.int32)
        return self._left_out

    @property
    def pred(self) -> np.ndarray:
        """int32 current OOB class per row (ties to the lowest class; -1: never out of bag)."""
        if self._derived:
            pred = np.empty(self.votes.shape[0], np.int32)
            k.hard_pred(self.votes, pred)
            return pred
        return self._pred

    # -- folding ---------------------------------------------------------------------------------
    def fold(self, delta: MemberDelta) -> None:
        """Fold the next member (deltas must come in member order)."""
        assert delta.member == self.members, "members are folded in order"
        if self.task == "classes":
            if delta.votes.ndim == 1 and self._derived and self.n_classes == 2:  # two classes, hard votes
                k.fold_two_hard(delta.rows, delta.votes, self.y, self.votes, self.confusion, self.class_wrong,
                                self.class_covered, self.totals)
            else:
                if delta.votes.ndim == 1:  # hard votes as one class index per row
                    row_votes, row_class = self._no_votes, delta.votes
                else:
                    row_votes, row_class = delta.votes, self._no_class
                k.fold_classes(delta.rows, row_votes, row_class, self.y, self.votes, self._pred, self._left_out,
                               self.confusion, self.class_wrong, self.class_covered, self.totals)
        else:
            k.fold_regression(delta.rows, delta.votes, self.y, self.value_sum, self.value_m2, self._left_out,
                              self.sq_err, self.sums)
        m = self.members
        self.members += 1
        self._grow_curve()
        if self.task == "classes":
            # error() and interval() from two Python ints read at once: this runs between members,
            # while other threads grow, so its Python (and its hold on the GIL) is kept short
            wrong, covered = self.totals.tolist()
            self.curve[m] = wrong / covered if covered else float("nan")
            iv = wilson(wrong, covered)
            self.class_curve[m] = self._class_error_list()
        else:
            self.curve[m] = self.error()
            iv = self.interval()
        if iv is not None:
            self.curve_interval[m] = iv
        if self.live_fits and est.refit_due(self.members):
            t0 = time.perf_counter()
            self.est, self.mest = self.fits(sample=est.LIVE_ROWS)
            self.refit_seconds += time.perf_counter() - t0
            need = (self.mest or self.est).members_needed()
            self.needed.append([self.members, -1 if need is None else need])

    def _grow_curve(self) -> None:
        if self.members <= self.curve.shape[0]:
            return
        extra = max(self.members, 2 * self.curve.shape[0]) - self.curve.shape[0]
        self.curve = np.concatenate([self.curve, np.full(extra, np.nan)])
        self.curve_interval = np.concatenate([self.curve_interval, np.full((extra, 2), np.nan)])
        if self.task == "classes":
            self.class_curve = np.concatenate([self.class_curve, np.full((extra, self.n_classes), np.nan)])

    # -- figures ---------------------------------------------------------------------------------
    @property
    def covered(self) -> int:
        """Rows with at least one OOB vote so far."""
        return int(self.totals[1]) if self.task == "classes" else int(self.sums[2])

    @property
    def coverage(self) -> float:
        return self.covered / self.y.shape[0]

    def error(self) -> float:
        """Misclassification rate (classes) or MSE (regression) over covered rows; NaN while none."""
        n = self.covered
        if n == 0:
            return float("nan")
        if self.task == "classes":
            return float(self.totals[0]) / n
        return float(self.sums[0]) / n

    def interval(self):
        """95% interval of error(): Wilson's for a rate, a normal interval for the MSE."""
        if self.task == "classes":
            return wilson(int(self.totals[0]), self.covered)
        return normal_mean(float(self.sums[0]), float(self.sums[1]), float(self.sums[2]))

    def class_error(self) -> np.ndarray:
        """Per-class OOB error (share of the class's covered rows predicted wrongly; NaN while none)."""
        return np.array(self._class_error_list(), np.float64)

    def _class_error_list(self) -> list:
        # Python floats: for counts below 2**53 the quotient is the same double numpy gives, and a
        # few scalar divisions cost a tenth of the array calls (errstate, where) run once a member
        return [w / c if c > 0 else float("nan")
                for w, c in zip(self.class_wrong.tolist(), self.class_covered.tolist())]

    def class_interval(self) -> list:
        return [wilson(int(w), int(c)) for w, c in zip(self.class_wrong, self.class_covered)]

    def r2(self, mse: float | None = None) -> float:
        """1 - MSE / variance of the covered rows' targets; mse: another MSE than the textbook one
        (the estimate for the kept ensemble)."""
        n = self.sums[2]
        if n < 2:
            return float("nan")
        var = self.sums[4] / n - (self.sums[3] / n) ** 2
        m = self.sums[0] / n if mse is None else mse
        return float(1.0 - m / var) if var > 0 else float("nan")

    # -- the estimated error of the kept ensemble ---------------------------------------------------
    def fit(self, sample: int | None = None) -> "est.Fit":
        """Fit the estimated curve to the tallies as they stand (sample: see curve.fit_classes)."""
        if self.task == "classes":
            return est.fit_classes(self.votes, self._left_out, self.y, self.n_classes, self.members, sample=sample)
        return est.fit_regression(self.value_sum, self.value_m2, self._left_out, self.y, self.members)

    def fits(self, sample: int | None = None) -> tuple:
        """(the error's fit, the chosen measure's fit or None): the measure's from the same priors
        (classes); None for the error or MSE, or a measure without an estimate (AUC of three or more
        classes: the error's members_needed then stands for it)."""
        m = self.measure if self.measure not in ("", "error", "mse") else None
        if self.task == "classes":
            pr = est.class_priors(self.votes, self._left_out, self.y, self.n_classes, self.members, sample)
            err = est.error_fit(pr)
            return err, (measure_fit.from_priors(pr, (m,), err).get(m) if m else None)
        err = self.fit(sample)
        if m is None:
            return err, None
        return err, measure_fit.regression_fits(self.value_sum, self.value_m2, self._left_out, self.y, self.members,
                                                (m,), mse=err, sample=sample).get(m)

    def measure_live(self) -> dict | None:
        """The chosen measure's estimate from the latest refit, at the current size (None: none)."""
        f, b = self.mest, self.members
        if f is None:
            return None
        e, v = f.point(b)
        return {"name": self.measure, "value": e, "interval": f.interval(e, v), "limit": f.limit,
                "limit_interval": f.limit_interval, "members_needed": f.members_needed()}

    def live(self) -> dict:
        """The estimate for the current size from the latest fit: error, interval, class_error,
        class_interval, error_limit, error_limit_interval, members_needed (empty before a fit)."""
        f, b = self.est, self.members
        if f is None:
            return {}
        e, v = f.point(b)
        out = {"error": e, "interval": f.interval(e, v), "error_limit": f.limit,
               "error_limit_interval": f.limit_interval, "members_needed": f.members_needed()}
        if self.task == "classes":
            out["class_error"] = f.class_point(b)
        return out

    def curve_points(self, target: int) -> dict:
        """The latest fit's curve over sizes, for a dashboard to draw (curve.Fit.points)."""
        return self.est.points(self.est.points_top(target, self.members))

    # -- checkpoints -----------------------------------------------------------------------------
    def arrays(self) -> dict:
        """Every array of the tally, for a checkpoint (curves trimmed to the members folded)."""
        out = {"members": np.array([self.members], np.int64), "left_out": self.left_out}
        for name in self.ARRAYS:
            if hasattr(self, name) and name != "left_out":
                a = getattr(self, name)
                out[name] = a[: self.members] if name in ("curve", "class_curve", "curve_interval") else a
        if self.est is not None:
            out.update({"est_" + name: a for name, a in self.est.arrays().items()})
            out["est_needed"] = np.array(self.needed, np.int64).reshape(-1, 2)
        return out

    def restore(self, arrays: dict) -> None:
        """Load a checkpoint's arrays (already validated for shape and dtype by the caller)."""
        self.members = int(arrays["members"][0])
        fit = {name[4:]: a for name, a in arrays.items() if name.startswith("est_") and name != "est_needed"}
        self.est = est.Fit.from_arrays(self.task, fit) if fit else None
        self.needed = [[int(m), int(n)] for m, n in arrays.get("est_needed", np.zeros((0, 2), np.int64))]
        for name, a in arrays.items():
            if name == "members" or name.startswith("est_"):
                continue
            if self._derived and name in ("pred", "left_out"):
                continue  # they follow from the votes
            if name in ("curve", "class_curve", "curve_interval"):
                cur = getattr(self, name)
                if cur.shape[0] < a.shape[0]:
                    cur = np.concatenate([cur, np.full((a.shape[0] - cur.shape[0],) + cur.shape[1:], np.nan)])
                cur[: a.shape[0]] = a
                setattr(self, name, cur)
            else:
                getattr(self, name)[...] = a
