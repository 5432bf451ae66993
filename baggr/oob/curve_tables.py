"""The ensemble sizes, grids and error tables of the estimated curve (baggr/oob/curve.py has the
method and its sources): the sizes with a stored value, the grids of a row's vote probabilities with
their smoothing step, and the chance that b votes elect a wrong class at each grid point."""
from __future__ import annotations

import math

import numpy as np

EXACT_SIZES = 64          # every ensemble size up to here has its own value
SIZE_STEP = 1.05          # above it, pairs (b, b + 1) every 5% (odd and even sizes differ by ties)
MAX_SIZE = 1 << 22        # beyond the last stored size the curve runs to its limit like c / b
MAX_SIZE_THREE = 128      # three or more classes: exact sums cost O(b) per grid point and size
GRID_TWO = 101            # grid of a row's chance of voting right (two classes)
GRID_THREE = 20           # steps per side of the triangle grid (three or more classes)
PASSES_TWO, PASSES_THREE = 3, 1
# the triangle's smoothing step scaled so that it spreads weight as far (in chance units) as the
# line's three [1/4, 1/2, 1/4] passes over steps of 0.01: variance 1.5e-4 per axis
STRENGTH_THREE = 1.5e-4 / (4 / 12 * (1 / GRID_THREE) ** 2)


_cache: dict = {}


def sizes(max_size: int) -> np.ndarray:
    """Ensemble sizes with a stored value: 1..64, then pairs (b, b + 1) every 5% up to max_size."""
    key = ("sizes", max_size)
    if key not in _cache:
        out = list(range(1, min(EXACT_SIZES, max_size) + 1))
        b = float(EXACT_SIZES)
        while True:
            b *= SIZE_STEP
            s = int(round(b))
            if s + 1 > max_size:
                break
            if s > out[-1]:
                out += [s, s + 1]
        _cache[key] = np.array(out, np.int64)
    return _cache[key]


def variance_sizes(all_sizes: np.ndarray, step: float = math.sqrt(2)) -> np.ndarray:
    """Indices into all_sizes where the influence is computed (sizes a factor `step` apart); the
    design effect between them is interpolated in log b."""
    key = ("vsizes", all_sizes.shape[0], int(all_sizes[-1]), step)
    if key not in _cache:
        picks, last = [], 0.0
        for i, b in enumerate(all_sizes):
            if b <= 2 or b >= last * step or i == all_sizes.shape[0] - 1:
                picks.append(i)
                last = float(b)
        _cache[key] = np.array(picks, np.int64)
    return _cache[key]


def _grid_two() -> tuple[np.ndarray, np.ndarray]:
    key = "grid2"
    if key not in _cache:
        p = np.linspace(0.0, 1.0, GRID_TWO)
        _cache[key] = (np.ascontiguousarray(np.stack([p, 1.0 - p], axis=1)),
                       _smoothing(_line_neighbours(GRID_TWO), 2, PASSES_TWO))
    return _cache[key]


def _grid_three() -> tuple[np.ndarray, np.ndarray]:
    key = "grid3"
    if key not in _cache:
        h = GRID_THREE
        pts = [(i, j) for i in range(h + 1) for j in range(h + 1 - i)]
        index = {pt: n for n, pt in enumerate(pts)}
        nbrs = []
        for i, j in pts:
            cand = [(i + 1, j), (i - 1, j), (i, j + 1), (i, j - 1), (i + 1, j - 1), (i - 1, j + 1)]
            nbrs.append([index[c] for c in cand if c in index])
        grid = np.array([(i / h, j / h, (h - i - j) / h) for i, j in pts])
        _cache[key] = (np.ascontiguousarray(grid), _smoothing(nbrs, 6, PASSES_THREE, STRENGTH_THREE))
    return _cache[key]


def _line_neighbours(g: int) -> list:
    return [[j for j in (i - 1, i + 1) if 0 <= j < g] for i in range(g)]


def _smoothing(nbrs: list, degree: int, passes: int, strength: float = 1.0):
    """S = I - strength L / (2 degree), L the grid graph's Laplacian: symmetric, keeps the total
    weight, on a line the [1/4, 1/2, 1/4] kernel (EMS's smoothing step, Silverman et al. 1990);
    as a sparse matrix (indptr, index, value)."""
    g = len(nbrs)
    s = np.eye(g)
    w = strength / (2 * degree)
    for i, nb in enumerate(nbrs):
        for j in nb:
            s[i, j] += w
            s[i, i] -= w
    s = np.linalg.matrix_power(s, passes)
    s[np.abs(s) < 1e-15] = 0.0
    ptr = np.concatenate([[0], np.cumsum((s != 0).sum(axis=1))]).astype(np.int64)
    idx = np.ascontiguousarray(np.nonzero(s)[1].astype(np.int64))
    return ptr, idx, np.ascontiguousarray(s[s != 0])


def _g_two(all_sizes: np.ndarray, tie_wrong: bool) -> np.ndarray:
    """(G, S + 1): chance that b votes with chance p each of being right elect a wrong class;
    the last column is b -> oo (a tie at p = 1/2 counts half)."""
    key = ("g2", all_sizes.shape[0], int(all_sizes[-1]), tie_wrong)
    if key not in _cache:
        from scipy.special import bdtr
        p, _ = _grid_two()
        p = p[:, 0]
        b = all_sizes[None, :]
        # right votes X ~ Bin(b, p); wrong when X < b/2, or X = b/2 with the tie going elsewhere
        thr = np.where(all_sizes % 2 == 1, (all_sizes - 1) // 2, all_sizes // 2 - 1 + int(tie_wrong))[None, :]
        with np.errstate(all="ignore"):
            g = np.where(thr >= 0, bdtr(np.maximum(thr, 0), b, p[:, None]), 0.0)
        limit = np.where(p < 0.5, 1.0, np.where(p > 0.5, 0.0, 0.5))
        _cache[key] = np.ascontiguousarray(np.concatenate([g, limit[:, None]], axis=1))
    return _cache[key]


def _g_three(all_sizes: np.ndarray, tie_1: bool, tie_2: bool) -> np.ndarray:
    """(G, S + 1) for three categories (own class, other 1, other 2); tie_c: a tie with other c
    goes to the own class. Exact: P(own wins) = sum_x P(X_own = x) P(both others stay below x)."""
    key = ("g3", all_sizes.shape[0], int(all_sizes[-1]), tie_1, tie_2)
    if key not in _cache:
        from scipy.special import bdtr
        from scipy.stats import binom
        grid, _ = _grid_three()
        py, p1, p2 = grid[:, 0], grid[:, 1], grid[:, 2]
        q = np.where(p1 + p2 > 0, p1 / np.where(p1 + p2 > 0, p1 + p2, 1.0), 0.5)
        cols = []
        for b in all_sizes:
            x = np.arange(b + 1)[:, None]
            rest = b - x
            hi = np.minimum(rest, x - 1 + int(tie_1))
            lo = np.maximum(0, rest - (x - 1 + int(tie_2)))
            with np.errstate(all="ignore"):
                upper = np.where(hi >= 0, bdtr(np.maximum(hi, 0), rest, q[None, :]), 0.0)
                lower = np.where(lo >= 1, bdtr(np.maximum(lo - 1, 0), rest, q[None, :]), 0.0)
            inside = np.where(hi >= lo, upper - lower, 0.0)
            win = (binom.pmf(x, b, py[None, :]) * inside).sum(axis=0)
            cols.append(1.0 - win)
        # b -> oo: the own class wins when its chance is the largest (ties share)
        top = np.maximum(p1, p2)
        limit = np.where(py > top + 1e-12, 0.0, np.where(py < top - 1e-12, 1.0, 0.5))
        _cache[key] = np.ascontiguousarray(np.clip(np.stack(cols + [limit], axis=1), 0.0, 1.0))
    return _cache[key]
