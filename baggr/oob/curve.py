"""The estimated error of the kept b-member ensemble, for every b, from the OOB tally.

Why a correction: a row's OOB vote comes from the ~0.37 x M members whose draw left it out, so
the textbook OOB error after M members estimates the error of an ensemble of about 0.37 x M
members (Breiman 2001 defines the OOB estimate; the error of a majority-vote ensemble falls
towards its limit like c/b: Lopes 2019, Annals of Statistics 47(2); Lopes 2020, JSPI 204).

Classes. Given the data, the members are independent draws, so the votes a row gets from
members that left it out are independent draws from one distribution over the classes: the row's
vote probabilities p_i. The b-member ensemble errs on row i with probability g_b(p_i), the
chance that a plurality of b such votes is not the row's class (ties to the lowest class, as in
scoring); the OOB curve instead averages g_k over k ~ 0.37 b votes. The k_i votes a row has
pin p_i down only roughly, so the estimate goes through the distribution of p over the rows of
each class (empirical Bayes, Robbins 1956): that distribution (the prior) is estimated on a grid
by the smoothed EM of Silverman, Jones, Wilson & Nychka (1990, JRSS B 52: 271-324), the EM of
the nonparametric maximum likelihood mixing distribution (Kiefer & Wolfowitz 1956; Laird 1978)
with a small smoothing step each round, which keeps the deconvolution stable. The estimate for
size b is then sum_j prior_j g_b(p_j), averaged over the classes by their covered rows; b -> oo
gives the error limit. Two classes: one probability per row (a vote for its class or not).
Three classes: two (the row's class and the lower-indexed other). Four or more: the row's class,
its strongest rival by OOB votes and the rest together, ties counted against the row's class
(an approximation: the rest acts as one rival, so the figure leans high). Leaf-share votes are
rounded to whole votes per row (exact for pure leaves, the default full trees).

Regression. E[(y - mean of b members)^2 | row] = (y - mu_i)^2 + sigma_i^2 / b, mu_i and sigma_i^2
the mean and variance of a member's prediction for the row (bias-variance; as in Lopes, Wu & Lee
2020 for regression ensembles). With k_i OOB predictions of mean m_i and unbiased variance s_i^2,
(y - m_i)^2 - s_i^2 / k_i + s_i^2 / b is unbiased for it; rows with one prediction take the
pooled s^2 of the others. So the curve is A + B / b exactly, and the limit is A.

Intervals. The variance of the estimate over the sampling of rows is its infinitesimal jackknife
(the delta method through the smoothed-EM fixed point, Jaeckel 1972; Efron 1982 ch. 6): each row's
influence on the figure, squared and summed; the intervals take VARIANCE_FACTOR times it (below).
For classes the interval is Wilson's (1927) at the estimate with the effective number of rows
e (1 - e) / variance (the design-effect form used for survey proportions, Korn & Graubard 1998);
for regression a normal interval. bench/coverage.py measures how often these intervals hold the
kept ensemble's error on fresh rows.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from baggr.oob import curve_kernels as k
from baggr.oob.intervals import Z95, wilson

from baggr.oob.curve_tables import (  # noqa: F401  (the sizes, grids and tables, read through this module)
    EXACT_SIZES, GRID_THREE, GRID_TWO, MAX_SIZE, MAX_SIZE_THREE, SIZE_STEP, _g_three, _g_two, _grid_three,
    _grid_two, sizes, variance_sizes)
TOL, MAX_ITER = 1e-9, 5000
DROP = 1e-6              # grid points a cell's likelihood rules out (share below this) are skipped
LIVE_ROWS = 1024          # during a run, the estimate is refitted on at most about this many rows
FIRST_REFIT = 32
BLOCK = 128             # sizes a run's reading of a fit interpolates at once (Fit._block)
TOLERANCE_REL, TOLERANCE_ABS = 0.01, 0.001
# The infinitesimal jackknife runs about 10% low on the benchmark's problems (bench/coverage.py:
# the estimate minus the kept ensemble's error, over its jackknife standard error, has a standard
# deviation of about 1.05-1.07 across cells), as the delta-method variance of cross-validation-type
# estimates does (Bates, Hastie & Tibshirani 2023, JASA): the shared members tie the rows' votes
# together, and the kept ensemble's own error varies with its members (Lopes 2019). The intervals
# take this factor times it: a calibration, measured, not derived.
VARIANCE_FACTOR = 1.1


def refit_due(m: int) -> bool:
    """Members after which a run refits the estimate: 32, 64, 128, ... (each doubles the votes
    a row has). In between, the last fit is read at the current size: the distribution it
    estimates does not depend on the size, only its precision grows with the members."""
    return m >= FIRST_REFIT and m & (m - 1) == 0


# -- the fit ---------------------------------------------------------------------------------------
@dataclass
class Fit:
    """Estimated error of a b-member ensemble at the stored sizes (last entry: b -> oo), and the
    variance of each estimate; per class too (classes)."""

    task: str
    members: int              # members folded when this was fitted
    sizes: np.ndarray         # int64 ensemble sizes with a value (ascending)
    error: np.ndarray         # (S + 1,) estimate; last = error limit
    var: np.ndarray           # (S + 1,) its variance
    class_error: np.ndarray   # (S + 1, C) or (S + 1, 0) for regression
    class_var: np.ndarray
    measure: str = ""         # what `error` holds: "" the task's error (MSE), else a measure's name
                              # (baggr/oob/measure_fit.py); its interval and tolerance follow it

    ARRAYS = ("members", "sizes", "error", "var", "class_error", "class_var")

    # -- reading ---------------------------------------------------------------------------------
    def at(self, b) -> np.ndarray:
        """Estimate at ensemble sizes b (array of ints >= 1; 0 or less means unlimited)."""
        return self._interp(self.error, b)

    def var_at(self, b) -> np.ndarray:
        return self._interp(self.var, b)

    def class_at(self, b) -> np.ndarray:
        b = np.atleast_1d(np.asarray(b, np.int64))
        return np.stack([self._interp(self.class_error[:, c], b) for c in range(self.class_error.shape[1])],
                        axis=1) if self.class_error.shape[1] else np.zeros((b.shape[0], 0))

    def class_var_at(self, b) -> np.ndarray:
        b = np.atleast_1d(np.asarray(b, np.int64))
        return np.stack([self._interp(self.class_var[:, c], b) for c in range(self.class_var.shape[1])],
                        axis=1) if self.class_var.shape[1] else np.zeros((b.shape[0], 0))

    def _interp(self, values: np.ndarray, b) -> np.ndarray:
        """Values at sizes b: stored where b is a stored size; between two stored sizes of b's
        parity (or the last one and the limit) linear in 1/b, the c/b form of the curve's tail."""
        b = np.atleast_1d(np.asarray(b, np.int64))
        tabs = self.__dict__.get("_tabs")
        if tabs is None:
            tabs = self.__dict__["_tabs"] = _parity_tables(self.sizes)
        out = np.empty(b.shape[0])
        for par, (xs, idx) in enumerate(tabs):
            mine = (b % 2 == par) & (b > 0)
            if mine.any():
                out[mine] = np.interp(1.0 / b[mine], xs, values[idx])
        out[b <= 0] = values[-1]
        return out

    def interval(self, e: float, v: float):
        """95% interval of an estimate e with (jackknife) variance v (None while e is unknown)."""
        return interval(self.task, e, VARIANCE_FACTOR * v, self.measure)

    @property
    def limit(self) -> float:
        return float(self.error[-1])

    @property
    def limit_interval(self):
        return self.interval(float(self.error[-1]), float(self.var[-1]))

    def point(self, b: int) -> tuple:
        """(estimate, variance) at one size b, quickly (a run reads this after every member)."""
        i = b - 1
        if 0 <= i < EXACT_SIZES and i < self.sizes.shape[0] and self.sizes[i] == b:
            return float(self.error[i]), float(self.var[i])
        blk = self._block(b)
        if blk is None:
            return float(self.at(b)[0]), float(self.var_at(b)[0])
        j = b - blk[0]
        return blk[1][j], blk[2][j]

    def class_point(self, b: int) -> list:
        """class_at(b) of one size b as a list of floats, quickly (a run reads it after every member)."""
        blk = self._block(b)
        if blk is None:
            return self.class_at(b)[0].tolist()
        return blk[3][b - blk[0]]

    def _block(self, b: int):
        """(first, error, var, class_error) at the sizes first..first + BLOCK - 1 around b, as Python
        floats, interpolated for all of them at once and kept: a run reads the fit at b, b + 1, ...
        after each member, and one vectorised call per BLOCK sizes costs less than one per size.
        np.interp works element by element, so every value is the one at(b) gives. None for b < 1."""
        if b < 1:
            return None
        blk = self.__dict__.get("_blk")
        if blk is None or not blk[0] <= b < blk[0] + BLOCK:
            bs = np.arange(b, b + BLOCK, dtype=np.int64)
            cls = self.class_at(bs).tolist()
            blk = self.__dict__["_blk"] = (b, self.at(bs).tolist(), self.var_at(bs).tolist(), cls)
        return blk

    @property
    def higher_is_better(self) -> bool:
        return self.measure in HIGHER_IS_BETTER

    def tolerance(self) -> float:
        """How close to the limit counts as there: 1% of it or (classes) 0.1 point, the larger. For
        a measure where higher is better (AUC, R2), 1% of its distance to a perfect 1 (for R2 the
        same as 1% of the MSE limit, as a share of the targets' variance)."""
        lim = self.limit
        loss = 1.0 - lim if self.higher_is_better else lim
        if self.task == "classes":
            return max(TOLERANCE_REL * abs(loss), TOLERANCE_ABS)
        return TOLERANCE_REL * abs(loss)

    def points(self, top: int, count: int = 48) -> dict:
        """The curve at about `count` sizes from 1 to `top`, log-spaced, with its band (and per class),
        in short floats: what a journal line carries for a dashboard to draw."""
        # odd sizes: even ones add ties (decided by class order), a zigzag no one chooses a size by
        b = np.unique(np.round(np.geomspace(1, max(2, top), count)).astype(np.int64) | 1)
        e, v = self.at(b), self.var_at(b)
        iv = [self.interval(float(x), float(w)) for x, w in zip(e, v)]
        short = lambda xs: [float(f"{x:.6g}") for x in xs]  # noqa: E731  (a journal line, not a store)
        out = {"b": b.tolist(), "error": short(e), "lo": short(i[0] if i else float("nan") for i in iv),
               "hi": short(i[1] if i else float("nan") for i in iv)}
        if self.task == "classes":
            out["class_error"] = [short(col) for col in self.class_at(b).T]
        return out

    def points_top(self, target: int, members: int) -> int:
        """How far `points` should reach: past the target, the members so far and members_needed."""
        need = self.members_needed() or 0
        return int(min(max(2 * target, 2 * members, need + need // 4, 16), MAX_SIZE))

    def members_needed(self) -> int | None:
        """Fewest members from which the estimate stays within tolerance of the limit (None: more
        than the largest stored size)."""
        if "_needed" not in self.__dict__:
            self.__dict__["_needed"] = self._members_needed()
        return self.__dict__["_needed"]

    def _members_needed(self) -> int | None:
        if not np.isfinite(self.limit):
            return None
        # in loss form (lower is better): a measure where higher is better is turned round
        sign = -1.0 if self.higher_is_better else 1.0
        limit = sign * self.limit
        thr = limit + self.tolerance()
        e = sign * self.error[:-1]
        above = np.flatnonzero(~(e <= thr))
        if above.shape[0] == 0:
            return int(self.sizes[0])
        i = int(above[-1])
        if i == e.shape[0] - 1:
            # beyond the last size the curve falls like c / b: solve lim + (e_last - lim) s / b <= thr
            s, el = int(self.sizes[-1]), float(e[-1])
            need = int(math.ceil(s * (el - limit) / (thr - limit))) if thr > limit else None
            return need if need is not None and need < 1 << 40 else None
        lo, hi = int(self.sizes[i]) + 1, int(self.sizes[i + 1])
        cand = np.arange(lo, hi + 1, dtype=np.int64)
        ok = sign * self.at(cand) <= thr
        # from the first size after which every size up to hi is in
        bad = np.flatnonzero(~ok)
        return int(cand[bad[-1] + 1]) if bad.shape[0] else lo

    # -- storing ---------------------------------------------------------------------------------
    def arrays(self) -> dict:
        return {"members": np.array([self.members], np.int64), "sizes": self.sizes, "error": self.error,
                "var": self.var, "class_error": self.class_error, "class_var": self.class_var}

    @classmethod
    def from_arrays(cls, task: str, a: dict, measure: str = "") -> "Fit":
        if np.asarray(a["members"]).shape != (1,):
            raise ValueError("a fit's member count is one number")
        return cls(task, int(a["members"][0]), np.asarray(a["sizes"], np.int64), np.asarray(a["error"], np.float64),
                   np.asarray(a["var"], np.float64), np.asarray(a["class_error"], np.float64),
                   np.asarray(a["class_var"], np.float64), measure)

    def check(self) -> str | None:
        """What is wrong with stored fit arrays (None: nothing)."""
        s = self.sizes.shape[0]
        if self.members < 0:
            return "its member count is negative"
        if self.sizes.ndim != 1 or s < 1 or np.any(self.sizes < 1) or np.any(np.diff(self.sizes) <= 0):
            return "its ensemble sizes are not ascending whole numbers"
        if self.error.shape != (s + 1,) or self.var.shape != (s + 1,):
            return "its figures do not match its sizes"
        if self.class_error.ndim != 2 or self.class_error.shape[0] != s + 1 or self.class_var.shape != self.class_error.shape:
            return "its class figures do not match its sizes"
        return None


def _parity_tables(all_sizes: np.ndarray) -> list:
    """Per parity of b: 1/b of the stored sizes of that parity, ascending, with 0 (the limit) first,
    and the indices of their values (the limit is the last stored value)."""
    out = []
    last = all_sizes.shape[0]
    for par in (0, 1):
        sel = np.flatnonzero(all_sizes % 2 == par)
        if sel.shape[0] == 0:
            sel = np.arange(last)
        sel = sel[::-1]
        out.append((np.concatenate([[0.0], 1.0 / all_sizes[sel]]), np.concatenate([[last], sel])))
    return out


HIGHER_IS_BETTER = ("auc", "r2")
# the range of each measure: a normal interval is cut to it
BOUNDS = {"brier": (0.0, 2.0), "log-loss": (0.0, math.inf), "auc": (0.0, 1.0), "mse": (0.0, math.inf),
          "rmse": (0.0, math.inf), "mae": (0.0, math.inf), "r2": (-math.inf, 1.0)}


def interval(task: str, e: float, v: float, measure: str = ""):
    """Wilson's interval at e with e (1 - e) / v effective rows (the error and the balanced error, both
    shares of rows); otherwise normal, cut to the measure's range."""
    if not (e == e) or not (v == v):
        return None
    if measure not in ("", "error", "balanced-error", "mse") or (task != "classes" and measure):
        h = Z95 * math.sqrt(max(v, 0.0))
        lo, hi = BOUNDS.get(measure, (-math.inf, math.inf))
        return (max(lo, e - h), min(hi, e + h))
    if task == "classes":
        if v <= 0.0:
            return (e, e)
        n_eff = e * (1.0 - e) / v
        if n_eff <= 0.0:
            # e is 0 or 1: the spread alone
            h = Z95 * math.sqrt(v)
            return (max(0.0, e - h), min(1.0, e + h))
        n_eff = max(n_eff, 1.0)
        iv = wilson(e * n_eff, n_eff)
        return iv
    h = Z95 * math.sqrt(max(v, 0.0))
    return (max(0.0, e - h), e + h)


@dataclass
class Priors:
    """The estimated distribution of the rows' vote probabilities, per class (the smoothed-EM prior)
    with what the influence of a row on a figure needs: per class c with covered rows, (c, the
    cells' likelihood lp, li, lv, the cells' row counts cf, the prior pi)."""

    n_classes: int
    three: bool
    grid: np.ndarray
    smooth: tuple
    parts: list
    covered: np.ndarray
    members: int
    sample: bool


def class_priors(votes: np.ndarray, left_out: np.ndarray, y: np.ndarray, n_classes: int, members: int,
                 sample: int | None = None) -> Priors:
    """The prior of every class from a class tally (see fit_classes for the arguments)."""
    three = n_classes >= 3
    grid, smooth = _grid_three() if three else _grid_two()
    sp, si, sv = smooth
    covered = np.zeros(n_classes)
    stride = max(1, votes.shape[0] // sample) if sample else 1
    parts = []
    dims, rival = (2 if three else 1), n_classes > 3
    for c in range(n_classes):
        cells, counts = k.class_cells(votes, left_out, y, c, dims, rival, stride)
        nc = float(counts.sum())
        covered[c] = nc
        if nc == 0:
            continue
        lp, li, lv = k.likelihood(cells, grid, DROP)
        cf = counts.astype(np.float64)
        pi, _ = k.ems(lp, li, lv, cf, sp, si, sv, grid.shape[0], TOL, MAX_ITER)
        parts.append((c, lp, li, lv, cf, pi))
    return Priors(n_classes, three, grid, smooth, parts, covered, members, bool(sample))


def class_influence(pr: Priors, part, gvals: np.ndarray) -> np.ndarray:
    """(cells, B) influence of one more row in each of the part's cells on pi' gvals (columns: figures)."""
    _, lp, li, lv, cf, pi = part
    sp, si, sv = pr.smooth
    return k.influence(lp, li, lv, cf, sp, si, sv, pi, np.ascontiguousarray(gvals))


def weighted_fit(pr: Priors, tables, all_sizes: np.ndarray, measure: str = "") -> Fit:
    """A figure that is a mean over rows of a function of the row's vote probabilities and the
    ensemble size: tables(c) gives its (G, S + 1) values for a row of class c at each grid point and
    size (last column b -> oo); the estimate per class is prior' table, overall the classes weighted
    by their covered rows, its variance the infinitesimal jackknife (module docstring)."""
    vi = variance_sizes(all_sizes, 2.0 if pr.sample else math.sqrt(2))   # a run's refits: fewer
    cols = np.concatenate([vi, [all_sizes.shape[0]]])   # + the limit column
    n_sizes = all_sizes.shape[0] + 1
    n_classes = pr.n_classes
    class_error = np.full((n_sizes, n_classes), np.nan)
    class_var = np.full((n_sizes, n_classes), np.nan)
    share = measure in ("", "error")
    parts = []
    for part in pr.parts:
        c, cf, pi = part[0], part[4], part[5]
        nc = float(pr.covered[c])
        g = tables(c)
        est = pi @ g
        psi = class_influence(pr, part, g[:, cols])
        parts.append((c, est, psi, cf))
        class_error[:, c] = est
        v_at = (cf[:, None] * psi ** 2).sum(axis=0) / (nc * nc)
        class_var[:, c] = _spread_var(est, v_at, cols, all_sizes, nc) if share else _log_var(v_at, cols, all_sizes)
    total = pr.covered.sum()
    error = np.full(n_sizes, np.nan)
    var = np.full(n_sizes, np.nan)
    if total > 0:
        q = pr.covered / total
        error = np.nansum(class_error * q[None, :], axis=1)
        # a row's influence on the class-weighted figure: its class's estimate and its own pull
        v = np.zeros(cols.shape[0])
        for c, est, psi, cf in parts:
            dev = est[cols][None, :] + psi - error[cols][None, :]
            v += (cf[:, None] * dev ** 2).sum(axis=0)
        v /= total * total
        var = _spread_var(error, v, cols, all_sizes, total) if share else _log_var(v, cols, all_sizes)
    return Fit("classes", pr.members, all_sizes, error, var, class_error, class_var, measure)


def fit_classes(votes: np.ndarray, left_out: np.ndarray, y: np.ndarray, n_classes: int, members: int,
                sample: int | None = None) -> Fit:
    """The estimate from a class tally: votes (n, C), left_out (n,) or empty (hard votes).

    sample: fit to every stride-th row only, so that about `sample` rows are read (a run's refits:
    their cost does not grow with the table); the figures and their variance are then those of
    that sample, a spread-out part of the table. None: every row (the finished ensemble)."""
    return error_fit(class_priors(votes, left_out, y, n_classes, members, sample))


def error_fit(pr: Priors) -> Fit:
    """The error of the kept ensemble from the priors."""
    all_sizes = sizes(MAX_SIZE_THREE if pr.three else MAX_SIZE)
    n_classes = pr.n_classes

    def tables(c):
        if pr.three:
            others = [o for o in range(n_classes) if o != c]
            tie1, tie2 = (c < others[0], c < others[1]) if n_classes == 3 else (c == 0, c == 0)
            return _g_three(all_sizes, tie1, tie2)
        return _g_two(all_sizes, tie_wrong=c > 0)

    return weighted_fit(pr, tables, all_sizes)


def _log_var(v_at: np.ndarray, cols: np.ndarray, all_sizes: np.ndarray) -> np.ndarray:
    """Variance at every stored size from its value at some, interpolated in log b (log of the
    variance where positive); the last column, the limit, kept as computed."""
    logb = np.log(all_sizes.astype(np.float64))
    x = logb[cols[:-1]]
    pos = v_at[:-1] > 0
    out = np.empty(all_sizes.shape[0] + 1)
    if pos.all():
        out[:-1] = np.exp(np.interp(logb, x, np.log(v_at[:-1])))
    else:
        out[:-1] = np.interp(logb, x, v_at[:-1])
    out[cols[:-1]] = v_at[:-1]
    out[-1] = v_at[-1]
    return out


def _spread_var(est: np.ndarray, v_at: np.ndarray, cols: np.ndarray, all_sizes: np.ndarray, n: float) -> np.ndarray:
    """Variance at every stored size from its value at some: the design effect v / (e (1 - e) / n)
    interpolated in log b (the last column, the limit, kept as computed)."""
    e_at = est[cols]
    base = np.maximum(e_at * (1 - e_at), 1e-12) / n
    deff = v_at / base
    logb = np.log(np.concatenate([all_sizes.astype(np.float64), [np.inf]]))
    lx = logb[cols[:-1]]
    d = np.interp(np.log(all_sizes.astype(np.float64)), lx, deff[:-1])
    out = np.empty(est.shape[0])
    out[:-1] = d * np.maximum(est[:-1] * (1 - est[:-1]), 1e-12) / n
    out[-1] = v_at[-1]
    # where the influence itself was computed, keep it exactly
    out[cols[:-1]] = v_at[:-1]
    return out


def fit_regression(value_sum: np.ndarray, value_m2: np.ndarray, left_out: np.ndarray, y: np.ndarray,
                   members: int) -> Fit:
    """The estimate from a regression tally: error(b) = A + B / b (see the module docstring)."""
    all_sizes = sizes(EXACT_SIZES)
    e, s2, kk = k.regression_rows(value_sum, value_m2, left_out, y)
    n = e.shape[0]
    n_sizes = all_sizes.shape[0] + 1
    empty = np.zeros((n_sizes, 0))
    if n == 0:
        nan = np.full(n_sizes, np.nan)
        return Fit("regression", members, all_sizes, nan, nan.copy(), empty, empty.copy())
    two = kk > 1
    pooled = float(np.mean(s2[two])) if np.any(two) else 0.0
    s2 = np.where(two, s2, pooled)
    a = e - s2 / kk
    # a row's estimate at size b is a + s2 x, x = 1/b (0: unlimited); mean and variance from sums
    x = np.concatenate([1.0 / all_sizes, [0.0]])
    sa, ss = float(a.sum()), float(s2.sum())
    saa, sas, sss = float(a @ a), float(a @ s2), float(s2 @ s2)
    error = (sa + ss * x) / n
    total_sq = saa + 2 * sas * x + sss * x * x
    var = np.maximum(total_sq - n * error ** 2, 0.0) / (n - 1) / n if n > 1 else np.full(n_sizes, np.nan)
    return Fit("regression", members, all_sizes, error, var, empty, empty.copy())
