"""One tree grown on binned codes: the Tree node arrays, grow() (one checked call) and Learner (a table
checked once, then tree after tree with reused scratch and the out-of-bag votes cast on the way)."""
from __future__ import annotations

import mmap
from dataclasses import dataclass

import numpy as np

from baggr.errors import ConfigError, DataError
from baggr.learn.split_kernels import ENTROPY, GINI, VARIANCE
from baggr.learn.tree_kernels import NO_ROWS, OOB_CLASS, OOB_LEAF, OOB_VALUE, TOO_HEAVY, Work, grow_kernel

CRITERIA = {"gini": GINI, "entropy": ENTROPY, "variance": VARIANCE}


@dataclass
class Tree:
    """Node arrays of one tree; node 0 is the root and children have larger indices than their parent.

    threshold: numeric split goes left when code <= threshold; categorical split: row of cat_masks
    holding the left-going level set (levels not in it, seen or unseen, go right).
    value: class shares (classes) or weighted mean (regression) of the node's in-bag draws.
    candidates: features scanned at the node (constant ones included; 0 where no search ran,
    > 0 at a leaf whose search found no split). visits = sum of n_rows * candidates over
    internal nodes.
    """

    left: np.ndarray          # int32 [n_nodes], -1 at leaves
    right: np.ndarray         # int32 [n_nodes], -1 at leaves
    feature: np.ndarray       # int32 [n_nodes], -1 at leaves
    threshold: np.ndarray     # int32 [n_nodes]
    is_cat: np.ndarray        # uint8 [n_nodes], 1 for a categorical split
    missing_left: np.ndarray  # uint8 [n_nodes], 1 if code 255 goes left
    value: np.ndarray         # float64 [n_nodes, n_out]
    n_rows: np.ndarray        # int32 [n_nodes], distinct in-bag rows
    weight: np.ndarray        # int32 [n_nodes], in-bag draw weight
    impurity: np.ndarray      # float64 [n_nodes]
    candidates: np.ndarray    # int32 [n_nodes]
    cat_masks: np.ndarray     # uint64 [n_masks, 4]
    visits: int

    @property
    def n_nodes(self) -> int:
        """Number of nodes."""
        return int(self.left.shape[0])

    @property
    def leaves(self) -> np.ndarray:
        """Indices of the leaves."""
        return np.flatnonzero(self.left < 0)


@dataclass
class Grown:
    """One grown tree (None when not kept) and the votes it casts for its out-of-bag rows."""

    tree: Tree | None
    oob_rows: np.ndarray   # int32, ascending: the rows with draw count 0
    oob_int: np.ndarray    # int32 per OOB row: its leaf ("leaf") or hard-vote class ("class"); else empty
    oob_value: np.ndarray  # float64 [k, n_out] leaf values per OOB row ("value"); else empty
    visits: int
    n_nodes: int


def _pages(shape, dtype) -> np.ndarray:
    """An uninitialised array on its own anonymous mapping of small pages.

    Only the pages the kernel touches become resident. (numpy asks for huge pages on arrays of
    4 MiB and more, and a touch anywhere in a 2 MiB huge page makes all of it resident: a
    scratch array used up to two thirds of its length would then count in full.)
    """
    size = int(np.prod(shape)) * np.dtype(dtype).itemsize
    if size < 1 << 20:
        return np.empty(shape, dtype)
    return np.frombuffer(mmap.mmap(-1, size), dtype=dtype).reshape(shape)


class Scratch:
    """Working arrays of the tree kernel for one table, reused tree after tree by one thread.

    Address space only is reserved: pages are touched (and count as resident) as far as the
    largest tree so far needed them, and no tree pays for page faults or zeroing again.
    """

    def __init__(self, n_rows: int, n_out: int, regression: bool, keep: bool):
        n = max(int(n_rows), 1)
        self.idx = _pages((2, n), np.int32)
        self.lw = _pages((2, n), np.int32)
        self.yv = _pages((2, n if regression else 0), np.float64)
        self.ws = _pages(n if regression else 0, np.float64)
        cap = 2 * n - 1 if keep else 1
        self.ni = _pages((cap, 8), np.int32)
        self.nf = _pages((cap, n_out + 1), np.float64)
        self.stk = _pages((n + 1, 6), np.int32)
        self.stkc = _pages((n + 1, 1 if regression else n_out), np.float64)
        self.work = Work(self.idx, self.lw, self.yv, self.ws, self.ni, self.nf, self.stk, self.stkc)

    @property
    def weights(self) -> np.ndarray:
        """An int32 row to write a draw into: the kernel reads each entry before it reuses it."""
        return self.lw[0]


def _no_scratch() -> Scratch:
    """Empty working arrays: the kernel allocates its own (safe for calls from many threads at once)."""
    s = Scratch.__new__(Scratch)
    s.idx, s.lw = np.empty((2, 0), np.int32), np.empty((2, 0), np.int32)
    s.yv, s.ws = np.empty((2, 0), np.float64), np.empty(0, np.float64)
    s.ni, s.nf = np.empty((0, 8), np.int32), np.empty((0, 2), np.float64)
    s.stk, s.stkc = np.empty((0, 6), np.int32), np.empty((0, 1), np.float64)
    s.work = Work(s.idx, s.lw, s.yv, s.ws, s.ni, s.nf, s.stk, s.stkc)
    return s


OOB_MODES = {"leaf": OOB_LEAF, "class": OOB_CLASS, "value": OOB_VALUE}


@dataclass(frozen=True)
class Learner:
    """A table checked once for growing many trees on it: codes, bins, targets and the settings."""

    codes: np.ndarray
    n_bins: np.ndarray
    is_cat: np.ndarray
    y_class: np.ndarray
    y_value: np.ndarray
    regression: bool
    n_classes: int
    crit: int
    features_per_split: int
    min_leaf: int
    depth_limit: int
    exact_below: int

    @property
    def n_out(self) -> int:
        return 1 if self.regression else self.n_classes

    @classmethod
    def make(cls, codes, n_bins, is_cat, y_class, y_value, *, task, n_classes, criterion, features_per_split,
             min_leaf, depth_limit, exact_below=48) -> "Learner":
        """Check and cast everything but the draw (see grow for the arguments)."""
        codes = np.asarray(codes)
        if codes.dtype != np.uint8 or codes.ndim != 2:
            raise DataError(f"codes must be a 2-d uint8 array (features, rows), got {codes.dtype} {codes.shape}")
        codes = np.ascontiguousarray(codes)
        p, n = codes.shape
        n_bins = _vector(n_bins, np.int32, p, "n_bins")
        if p and (n_bins.min() < 0 or n_bins.max() > 255):
            raise DataError("n_bins must be between 0 and 255 for every feature")
        is_cat = _vector(is_cat, np.uint8, p, "is_cat")
        if task not in ("classes", "regression"):
            raise ConfigError(f"task must be 'classes' or 'regression', got {task!r}")
        if criterion not in CRITERIA:
            raise ConfigError(f"criterion must be one of {', '.join(CRITERIA)}, got {criterion!r}")
        if (criterion == "variance") != (task == "regression"):
            raise ConfigError(f"criterion {criterion!r} does not fit task {task!r}")
        regression = task == "regression"
        if regression:
            y_value = _vector(y_value, np.float64, n, "y_value")
            if not np.isfinite(y_value).all():
                raise DataError("the regression target has missing or infinite values")
            y_class = np.zeros(1, np.int32)
            n_classes = 1
        else:
            y_class = _vector(y_class, np.int32, n, "y_class")
            if not (isinstance(n_classes, (int, np.integer)) and n_classes >= 1):
                raise ConfigError(f"n_classes must be a whole number >= 1, got {n_classes!r}")
            if n and (y_class.min() < 0 or y_class.max() >= n_classes):
                raise DataError(f"class indices must be between 0 and {n_classes - 1}")
            y_value = np.zeros(1, np.float64)
        for name, v, low in (("features_per_split", features_per_split, 1), ("min_leaf", min_leaf, 1)):
            if not (isinstance(v, (int, np.integer)) and not isinstance(v, bool) and v >= low):
                raise ConfigError(f"{name} must be a whole number >= {low}, got {v!r}")
        if depth_limit is not None and not (isinstance(depth_limit, (int, np.integer)) and depth_limit >= 0):
            raise ConfigError(f"depth_limit must be None or a whole number >= 0, got {depth_limit!r}")
        if not (isinstance(exact_below, (int, np.integer)) and exact_below >= 0):
            raise ConfigError(f"exact_below must be a whole number >= 0, got {exact_below!r}")
        return cls(codes, n_bins, is_cat, y_class, y_value, regression, int(n_classes), CRITERIA[criterion],
                   int(min(features_per_split, max(p, 1))), int(min_leaf),
                   -1 if depth_limit is None else int(depth_limit), int(exact_below))

    def scratch(self, keep: bool = True) -> Scratch:
        """Working arrays for one thread growing trees on this table."""
        return Scratch(self.codes.shape[1], self.n_out, self.regression, keep)

    def grow(self, weights, rng_state, *, keep: bool = True, oob: str = "leaf", scratch: Scratch | None = None) -> Grown:
        """Grow one tree on int32 draw counts (one per row, >= 0) and vote for the rows they leave out.

        rng_state (uint64[1]) is advanced. oob: what each out-of-bag row gets, "leaf", "class" (the
        leaf's most frequent class, ties to the lowest) or "value" (the leaf's values).
        """
        s = scratch or _no_scratch()
        out = grow_kernel(self.codes, self.n_bins, self.is_cat, self.y_class, self.y_value, weights, rng_state,
                          int(self.regression), self.n_classes, self.crit, self.features_per_split, self.min_leaf,
                          self.depth_limit, self.exact_below, int(bool(keep)), OOB_MODES[oob], s.work)
        (left, right, feature, threshold, node_cat, missing_left, value, n_rows, weight, impurity, candidates,
         cat_masks, n_nodes, visits, oob_rows, oob_int, oob_value, status) = out
        if status == NO_ROWS:
            raise DataError("no in-bag rows to grow a tree on")
        if status == TOO_HEAVY:
            raise DataError("draw counts are too large for this number of classes")
        tree = Tree(left, right, feature, threshold, node_cat, missing_left, value, n_rows, weight, impurity,
                    candidates, cat_masks, int(visits)) if keep else None
        return Grown(tree, oob_rows, oob_int, oob_value, int(visits), int(n_nodes))


def grow(codes, n_bins, is_cat, y_class, y_value, weights, *, task, n_classes, criterion,
         features_per_split, min_leaf, depth_limit, rng_state, exact_below=48) -> Tree:
    """Grow one tree on feature-major uint8 codes (255 = missing), weighted by draw counts.

    Codes must be below n_bins[f] or 255 (checked once per table by check_codes, not here:
    that scan would cost a fair share of a tree). y_class (classes) or y_value (regression) must
    be valid for every row; the other may be a 1-element dummy. rng_state (uint64[1]) is copied,
    not advanced. exact_below: nodes with fewer distinct rows take the exact small-node path
    (same splits, faster there).
    """
    learner = Learner.make(codes, n_bins, is_cat, y_class, y_value, task=task, n_classes=n_classes,
                           criterion=criterion, features_per_split=features_per_split, min_leaf=min_leaf,
                           depth_limit=depth_limit, exact_below=exact_below)
    weights = _vector(weights, np.int32, learner.codes.shape[1], "weights")
    if weights.shape[0] and weights.min() < 0:
        raise DataError("weights (draw counts) must be >= 0")
    state = np.array(rng_state, dtype=np.uint64).reshape(-1).copy()
    if state.shape != (1,):
        raise ConfigError("rng_state must be a uint64 array of one element")
    return learner.grow(weights, state).tree


def check_codes(codes, n_bins) -> None:
    """Raise DataError unless every code of feature f is below n_bins[f] or is 255 (missing)."""
    codes = np.asarray(codes)
    n_bins = np.asarray(n_bins)
    for f in range(codes.shape[0]):
        c = codes[f]
        bad = (c >= n_bins[f]) & (c != 255)
        if bad.any():
            raise DataError(f"feature {f} has code {int(c[bad][0])} but only {int(n_bins[f])} bins")


def _vector(a, dtype, size, name):
    """a as a contiguous 1-d array of dtype and the given length (values must fit the dtype)."""
    arr = np.asarray(a)
    if arr.ndim != 1 or arr.shape[0] != size:
        raise DataError(f"{name} must be a 1-d array of length {size}, got shape {arr.shape}")
    if arr.dtype != dtype:
        cast = arr.astype(dtype)
        if arr.dtype.kind in "iuf" and np.dtype(dtype).kind in "iu" and not np.array_equal(cast, arr):
            raise DataError(f"{name} does not fit {np.dtype(dtype).name}")
        arr = cast
    return np.ascontiguousarray(arr)
