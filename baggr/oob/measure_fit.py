"""Every measure of the kept b-member ensemble, for every b: the estimate of baggr/oob/curve.py
carried from the error to the other measures.

The textbook OOB figure of any measure judges each row by its ~0.37 M OOB votes, so it describes
an ensemble of about 0.37 M members (Breiman 2001 defines the OOB estimate; the figures of a
randomized ensemble approach their limit like c/b: Lopes 2019, Annals of Statistics 47(2)). As for
the error, each class's rows have a distribution of vote probabilities p (the smoothed-EM prior of
curve.py: empirical Bayes, Robbins 1956; Silverman, Jones, Wilson & Nychka 1990), and a measure
that is a mean over rows is the prior's mean of the row's expected figure with b votes:

- brier: with b votes, a row's share s_c of class c is Binomial(b, p_c) / b, so
  E[sum_c (s_c - y_c)^2] = sum_c (p_c - y_c)^2 + p_c (1 - p_c) / b (the mean and variance of a
  binomial share; a closed form, checked in tests/test_measure_fit.py against the binomial sum).
  Three classes: exact over the triangle grid (own class, the two others). Four or more: the
  classes other than the row's own and its strongest rival act as one (as for the error), which
  counts their squares as one square: the figure leans high.
- log-loss: E[-log((X + 1/2) / (b + C/2))], X ~ Binomial(b, p_own): the README's definition (the
  Krichevsky-Trofimov share of b votes) over the binomial. It depends on p_own alone (any number of
  classes). -log p is unbounded near p = 0, so each grid point stands for its cell (width 1/100
  for two classes, 1/20 on the triangle) and the expectation is averaged over the cell
  (Gauss-Legendre, 8 nodes) rather than read at its centre: a point at p = 0 then costs a finite
  amount also at b -> oo (the limit: the cell mean of -log p).
- balanced-error: the mean over classes of the per-class estimated errors (curve.py's class
  curves); its variance the sum of the classes' variances over C^2 (the classes' rows are disjoint).
- auc (two classes): a positive row's b votes for its class are Binomial(b, p), p from the
  positive class's prior; a negative row's votes for the positive class Binomial(b, 1 - q), q from
  the negative class's prior; AUC_b = P(X_pos > X_neg) + P(X_pos = X_neg) / 2 in closed form
  (sums over the two mixtures, measure_fit_kernels.auc_tables). The two rows' votes are taken as
  independent: the same members vote on both, which ties their votes together a little (an
  approximation; tests/test_honest.py measures its bias). b -> oo: P(p > 1 - q) + ties / 2.
  Its variance: the delta method through both priors (the gradient of the bilinear form per
  class, through curve.py's influence). Three or more classes: no estimate (one-vs-rest needs a
  class's chance of a vote among the other classes' rows, which the rival grid does not keep);
  the textbook figure stands, and `corrected` says so.
- regression (Lopes, Wu & Lee 2020 for the c/b form): the MSE is curve.fit_regression's
  A + B / b; rmse its square root (variance by the delta method, var / (4 mse)); r2 = 1 - mse_b /
  Var(y), variance from the per-row influence of the ratio; mae: a row's OOB mean m_i has mean
  mu_i and spread s_i^2 / k_i; the kept ensemble's mean of b has spread s_i^2 / b, so its error is
  |N(delta_i, s_i^2 / b)| with delta_i = mu_i - y_i, whose mean is the folded normal's
  (Leone, Nelson & Nottingham 1961). delta_i is known only through |m_i - y_i| / s_i, a folded
  normal around |delta_i| / s_i with spread 1 / sqrt(k_i) (the members' predictions taken as
  normal): as for the classes, the distribution of |delta| / s over the rows is estimated on a grid
  (the mixing distribution's EM, Laird 1978; empirical Bayes, Robbins 1956) and each row's figure
  integrated over its posterior. Approximate: s_i is estimated, and the members' predictions are
  not normal (tests/test_measure_honest.py --bench measures the bias).

Intervals: the infinitesimal jackknife variance times curve.VARIANCE_FACTOR, as for the error;
normal, cut to the measure's range (balanced error: Wilson's with the effective rows, as the
error). The limits and members_needed follow (curve.Fit).
"""
from __future__ import annotations

import math

import numpy as np

from baggr.oob import curve as cv
from baggr.oob import curve_kernels as ck
from baggr.oob import measure_fit_kernels as k

AUC_MAX_SIZE = 1024       # AUC sums cost O(b) per grid point and size; beyond, linear in 1/b to the limit
AUC_EXACT, AUC_STEP = 32, 1.1   # every size up to AUC_EXACT, then pairs (b, b + 1) every 10%
MAE_MAX_SIZE = 256
MAE_ROWS = 100_000        # the MAE's per-row sums read at most about this many evenly spread rows
NODES = 8                 # Gauss-Legendre nodes per grid cell (log loss)
_cache: dict = {}


def has_estimate(measure: str, task: str, n_classes: int) -> bool:
    """Whether the measure has an estimate for the kept ensemble (all but the AUC of three or more classes)."""
    return not (task == "classes" and measure == "auc" and n_classes > 2)


def class_fits(votes, left_out, y, n_classes: int, members: int, sample: int | None = None,
               names=None, error: cv.Fit | None = None) -> dict:
    """{measure: curve.Fit} of the kept ensemble for the class measures in `names` (default all);
    error: the error's fit when already made (the balanced error reads its class curves)."""
    pr = cv.class_priors(votes, left_out, y, n_classes, members, sample)
    return from_priors(pr, names, error)


def from_priors(pr: cv.Priors, names=None, error: cv.Fit | None = None) -> dict:
    """class_fits from priors already fitted (a run's refit fits them once for the error and its measure)."""
    names = names or ("error", "balanced-error", "log-loss", "brier", "auc")
    n_classes = pr.n_classes
    out = {}
    if "error" in names or "balanced-error" in names:
        out["error"] = error if error is not None else cv.error_fit(pr)
    if "balanced-error" in names:
        out["balanced-error"] = balanced(out["error"])
    if "brier" in names:
        out["brier"] = brier_fit(pr)
    if "log-loss" in names:
        out["log-loss"] = log_loss_fit(pr)
    if "auc" in names and n_classes == 2:
        out["auc"] = auc_fit(pr)
    return {n: f for n, f in out.items() if n in names}


def balanced(err: cv.Fit) -> cv.Fit:
    """The mean over classes (with covered rows) of the per-class estimated errors."""
    ce, cvv = err.class_error, err.class_var
    have = np.isfinite(ce[-1])
    c = max(int(have.sum()), 1)
    e = ce[:, have].mean(axis=1) if have.any() else np.full(ce.shape[0], np.nan)
    v = cvv[:, have].sum(axis=1) / (c * c)
    return cv.Fit("classes", err.members, err.sizes, e, v, ce, cvv, "balanced-error")


def _own_p(pr: cv.Priors) -> tuple[np.ndarray, float]:
    """Each grid point's chance of a vote for the row's class, and the grid's step in it."""
    return pr.grid[:, 0], (1.0 / cv.GRID_THREE if pr.three else 1.0 / (cv.GRID_TWO - 1))


def brier_table(grid: np.ndarray, all_sizes: np.ndarray) -> np.ndarray:
    """(G, S + 1) expected Brier score of b votes at each grid point (rows: chances of each category,
    the row's own class first): sum_c (p_c - y_c)^2 + p_c (1 - p_c) / b; last column b -> oo."""
    y = np.zeros(grid.shape[1])
    y[0] = 1.0
    sq = ((grid - y[None, :]) ** 2).sum(axis=1)
    spread = (grid * (1.0 - grid)).sum(axis=1)
    x = np.concatenate([1.0 / all_sizes, [0.0]])
    return np.ascontiguousarray(sq[:, None] + spread[:, None] * x[None, :])


def brier_fit(pr: cv.Priors) -> cv.Fit:
    all_sizes = cv.sizes(cv.MAX_SIZE)
    key = ("brier", pr.three)
    if key not in _cache:
        _cache[key] = brier_table(pr.grid, all_sizes)
    table = _cache[key]
    return cv.weighted_fit(pr, lambda c: table, all_sizes, "brier")


def log_loss_table(p: np.ndarray, step: float, all_sizes: np.ndarray, n_classes: int) -> np.ndarray:
    """(G, S + 1) expected log loss of b votes at each grid point, averaged over its cell; last
    column b -> oo (the cell mean of -log p)."""
    key = ("ll", p.shape[0], step, all_sizes.shape[0], int(all_sizes[-1]), n_classes)
    if key not in _cache:
        x, w = np.polynomial.legendre.leggauss(NODES)
        lo = np.clip(p - step / 2, 0.0, 1.0)
        hi = np.clip(p + step / 2, 0.0, 1.0)
        nodes = (lo[:, None] + (hi - lo)[:, None] * (x[None, :] + 1) / 2).ravel()
        wts = np.broadcast_to(w / w.sum(), (p.shape[0], NODES))
        t = k.log_loss_table(nodes, all_sizes.astype(np.int64), n_classes / 2.0)
        t = np.concatenate([t, -np.log(nodes)[:, None]], axis=1).reshape(p.shape[0], NODES, -1)
        _cache[key] = np.ascontiguousarray((t * wts[:, :, None]).sum(axis=1))
    return _cache[key]


def log_loss_fit(pr: cv.Priors) -> cv.Fit:
    all_sizes = cv.sizes(cv.MAX_SIZE)
    p, step = _own_p(pr)
    table = log_loss_table(p, step, all_sizes, pr.n_classes)
    return cv.weighted_fit(pr, lambda c: table, all_sizes, "log-loss")


def auc_sizes() -> np.ndarray:
    """The sizes the AUC is summed at (its sums cost O(b) each; between them, linear in 1/b)."""
    if "auc_sizes" not in _cache:
        out, b = list(range(1, AUC_EXACT + 1)), float(AUC_EXACT)
        while True:
            b *= AUC_STEP
            s = int(round(b))
            if s + 1 > AUC_MAX_SIZE:
                break
            if s > out[-1]:
                out += [s, s + 1]
        _cache["auc_sizes"] = np.array(out, np.int64)
    return _cache["auc_sizes"]


def auc_fit(pr: cv.Priors) -> cv.Fit | None:
    """The AUC of the kept two-class ensemble (the share of class 1 ranks the rows)."""
    parts = {part[0]: part for part in pr.parts}
    if 0 not in parts or 1 not in parts:
        return None
    all_sizes = auc_sizes()
    r = pr.grid[:, 0]                        # a chance of a vote for class 1, ascending 0..1
    pi1 = parts[1][5]
    pi0 = parts[0][5][::-1].copy()           # class 0's chance of a class-1 vote is 1 - q: the grid reversed
    auc, g1, g0 = k.auc_tables(r, pi1, pi0, all_sizes.astype(np.int64))
    # b -> oo: the shares are the chances themselves
    below = np.cumsum(pi0) - pi0             # P(negative's chance < r_j)
    above = pi1.sum() - np.cumsum(pi1)       # P(positive's chance > r_l)
    lim1, lim0 = below + 0.5 * pi0, above + 0.5 * pi1
    auc = np.concatenate([auc, [float(pi1 @ lim1)]])
    g1 = np.concatenate([g1, lim1[:, None]], axis=1)
    g0 = np.concatenate([g0, lim0[:, None]], axis=1)[::-1]   # back to class 0's own grid
    vi = cv.variance_sizes(all_sizes, 2.0 if pr.sample else math.sqrt(2))
    cols = np.concatenate([vi, [all_sizes.shape[0]]])
    v = np.zeros(cols.shape[0])
    for c, g in ((1, g1), (0, g0)):
        part = parts[c]
        psi = cv.class_influence(pr, part, g[:, cols])
        nc = float(pr.covered[c])
        v += (part[4][:, None] * psi ** 2).sum(axis=0) / (nc * nc)
    var = cv._log_var(v, cols, all_sizes)
    none = np.zeros((all_sizes.shape[0] + 1, 0))
    return cv.Fit("classes", pr.members, all_sizes, auc, var, none, none.copy(), "auc")


# -- regression ----------------------------------------------------------------------------------
def regression_fits(value_sum, value_m2, left_out, y, members: int, names=None, mse: cv.Fit | None = None,
                    sample: int | None = None) -> dict:
    """{measure: curve.Fit} of the kept regression ensemble (mse, rmse, mae, r2, or those in names);
    sample: the MAE reads about this many evenly spread rows (a run's refits), else at most MAE_ROWS."""
    names = names or ("mse", "rmse", "mae", "r2")
    mse = mse if mse is not None else cv.fit_regression(value_sum, value_m2, left_out, y, members)
    out = {"mse": mse}
    if "rmse" in names:
        e = np.sqrt(np.maximum(mse.error, 0.0))
        with np.errstate(divide="ignore", invalid="ignore"):
            v = np.where(mse.error > 0, mse.var / (4.0 * mse.error), 0.0)
        out["rmse"] = cv.Fit("regression", members, mse.sizes, e, v, mse.class_error, mse.class_var, "rmse")
    if "mae" in names or "r2" in names:
        e, s2, kk = ck.regression_rows(value_sum, value_m2, left_out, y)
        yy = np.asarray(y, np.float64)[np.asarray(left_out) > 0]
        two = kk > 1
        pooled = float(np.mean(s2[two])) if np.any(two) else 0.0
        s2 = np.where(two, s2, pooled)
        if "r2" in names:
            out["r2"] = _r2(e - s2 / kk, s2, yy, mse, members)
        if "mae" in names:
            out["mae"] = _mae(e, s2, kk, members, sample or MAE_ROWS)
    return {n: f for n, f in out.items() if n in names}


def _r2(a, s2, yy, mse: cv.Fit, members: int) -> cv.Fit:
    """1 - mse_b / Var(y); a row's influence phi_i = -(m_i - M) / V + M ((y_i - ybar)^2 - V) / V^2,
    m_i = a_i + s2_i / b its estimated squared error, linear in x = 1/b, so the sums of phi^2 are
    quadratics in x."""
    n = yy.shape[0]
    x = np.concatenate([1.0 / mse.sizes, [0.0]])
    nan = np.full(x.shape[0], np.nan)
    none = mse.class_error
    if n < 2:
        return cv.Fit("regression", members, mse.sizes, nan, nan.copy(), none, none.copy(), "r2")
    d = (yy - yy.mean()) ** 2
    var_y = float(d.mean())
    if not var_y > 0:
        return cv.Fit("regression", members, mse.sizes, nan, nan.copy(), none, none.copy(), "r2")
    d -= var_y
    A, S = float(a.mean()), float(s2.mean())
    alpha = -(a - A) / var_y + A * d / var_y ** 2
    beta = -(s2 - S) / var_y + S * d / var_y ** 2
    ss = float(alpha @ alpha) + 2 * float(alpha @ beta) * x + float(beta @ beta) * x * x
    r2 = 1.0 - (A + S * x) / var_y
    return cv.Fit("regression", members, mse.sizes, r2, ss / (n * (n - 1)), none, none.copy(), "r2")


def _mae(e, s2, kk, members: int, rows: int) -> cv.Fit:
    """The mean over rows of E|N(delta_i, s_i^2 / b)| (the folded normal's mean), with delta_i
    integrated over its empirical-Bayes posterior (module docstring)."""
    all_sizes = cv.sizes(MAE_MAX_SIZE)
    stride = max(1, e.shape[0] // rows)
    e, s2, kk = e[::stride], s2[::stride], kk[::stride]
    n = e.shape[0]
    n_sizes = all_sizes.shape[0] + 1
    none = np.zeros((n_sizes, 0))
    if n == 0:
        nan = np.full(n_sizes, np.nan)
        return cv.Fit("regression", members, all_sizes, nan, nan.copy(), none, none.copy(), "mae")
    s = np.sqrt(s2)
    flat = s <= 0                      # no spread: the error is |d| at every size
    z = np.where(flat, 0.0, np.sqrt(e) / np.where(flat, 1.0, s))
    t = (np.arange(MAE_GRID) / (MAE_GRID - 1)) ** 2 * (float(z.max()) + 4.0)
    like = _folded_like(z, np.sqrt(kk), t)
    fit_rows = slice(None, None, max(1, n // MAE_PRIOR_ROWS))
    pi = _npmle(like[fit_rows])
    post = like * pi[None, :]
    post /= np.maximum(post.sum(axis=1, keepdims=True), 1e-300)
    x = np.concatenate([1.0 / all_sizes, [0.0]])
    table = _folded_mean(t[:, None], np.sqrt(x)[None, :])            # (G, S + 1)
    w = np.where(flat, 0.0, s)[:, None] * post                         # a row's weight on each grid point
    est = (w.sum(axis=0) @ table + np.sqrt(e[flat]).sum()) / n
    vi = cv.variance_sizes(all_sizes)
    cols = np.concatenate([vi, [all_sizes.shape[0]]])
    per_row = w @ table[:, cols] + np.where(flat, np.sqrt(e), 0.0)[:, None]
    v_at = per_row.var(axis=0, ddof=1) / n if n > 1 else np.full(cols.shape[0], np.nan)
    return cv.Fit("regression", members, all_sizes, est, cv._log_var(v_at, cols, all_sizes), none, none.copy(), "mae")


MAE_GRID, MAE_PRIOR_ROWS, MAE_EM_STEPS = 160, 4000, 300


def _folded_like(z, sqrt_k, t):
    """(n, G) likelihood of |z_i| (the row's |OOB mean - target| over its spread, noise 1/sqrt(k_i)) at
    each |delta| / spread t_j: the folded normal density, up to a factor per row."""
    a = (z[:, None] - t[None, :]) * sqrt_k[:, None]
    b = (z[:, None] + t[None, :]) * sqrt_k[:, None]
    top = (-0.5 * np.minimum(a * a, b * b)).max(axis=1, keepdims=True)   # the row's largest exponent
    return np.exp(-0.5 * a * a - top) + np.exp(-0.5 * b * b - top)


def _npmle(like):
    """The mixing distribution's EM (Laird 1978) on the grid from a flat start, a fixed number of steps."""
    pi = np.full(like.shape[1], 1.0 / like.shape[1])
    for _ in range(MAE_EM_STEPS):
        f = like @ pi
        pi = pi * (like.T @ (1.0 / np.maximum(f, 1e-300))) / like.shape[0]
    return pi / pi.sum()


def _folded_mean(mu, sd):
    """E|N(mu, sd^2)| = sd sqrt(2/pi) exp(-mu^2 / 2 sd^2) + mu erf(mu / (sd sqrt 2)) (Leone et al. 1961)."""
    from scipy.special import erf
    with np.errstate(divide="ignore", invalid="ignore"):
        r = np.where(sd > 0, mu / (sd * math.sqrt(2.0)), np.inf)
        out = np.where(sd > 0, sd * math.sqrt(2.0 / math.pi) * np.exp(-np.minimum(r * r, 700.0)), 0.0) + mu * erf(r)
    return np.where(sd > 0, out, np.abs(mu))


def of_oob(oob) -> dict:
    """{measure: curve.Fit} of a run's OOB view for every measure of its task that has an estimate
    (empty for a model file without the stored targets or the estimate)."""
    a = oob.arrays()
    if "target" not in a or not oob.corrected or oob.members == 0:
        return {}
    fit = oob._fit
    if oob.task == "classes":
        votes = a["votes"]
        left_out = np.zeros(0, np.int32) if votes.dtype == np.int32 else np.ascontiguousarray(oob.left_out)
        y = np.ascontiguousarray(a["target"], dtype=np.int32)
        return class_fits(votes, left_out, y, votes.shape[1], oob.members, error=fit)
    return regression_fits(a["value_sum"], a["value_m2"], np.ascontiguousarray(oob.left_out, dtype=np.int32),
                           np.ascontiguousarray(a["target"], dtype=np.float64), oob.members, mse=fit)
