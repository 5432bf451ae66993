"""Trees of the tree kernel on small fixed problems, as (shortened) sha256 digests of every array it returns.

The committed digests (tests/data/tree_digests.json) were made by the kernel as it stood before it
was split into named steps (commit 909f52b), through `python bench/kernel_ab.py --old 909f52b
--write-reference`; test_tree.py checks that today's kernel grows the same trees to the last bit.
A change that is meant to change trees writes the file again (with --old HEAD after committing)
and says why.

The tables are built here from the published generators with a plain quantile binning and numpy
draws, so that only the tree kernel (and baggr.learn.rng's streams) stands between them and the
digests. Entropy uses log2 from the C library: a platform whose log2 differs in the last bit would
change those digests, not the Gini and variance ones (only + - * / there).
"""
import dataclasses
import hashlib

import numpy as np

from generators import friedman1, twonorm, waveform

MISSING = 255


def _codes(X, bins=64):
    """Feature-major uint8 codes of X: quantile edges, code = edges at or below the value."""
    n, p = X.shape
    codes = np.empty((p, n), np.uint8)
    n_bins = np.empty(p, np.int32)
    for f in range(p):
        edges = np.unique(np.quantile(X[:, f], np.linspace(0, 1, bins + 1)[1:-1]))
        codes[f] = np.searchsorted(edges, X[:, f], side="right")
        n_bins[f] = len(edges) + 1
    return codes, n_bins


def _levels_and_missing(codes, n_bins, features, levels, missing, seed):
    """Some features made categorical (code // step) and a share of missing codes everywhere."""
    codes, n_bins = codes.copy(), n_bins.copy()
    is_cat = np.zeros(codes.shape[0], np.uint8)
    for f in features:
        codes[f] = codes[f].astype(np.int64) * levels // n_bins[f]
        n_bins[f] = levels
        is_cat[f] = 1
    codes[np.random.default_rng(seed).random(codes.shape) < missing] = MISSING
    return codes, n_bins, is_cat


def problems():
    """name -> (codes, n_bins, is_cat, y_class, y_value, task, n_classes)."""
    X, y = twonorm(2000, seed=11)
    codes, n_bins = _codes(X)
    out = {"twonorm": (codes, n_bins, np.zeros(20, np.uint8), y.astype(np.int32), np.zeros(1), "classes", 2)}
    c, b, k = _levels_and_missing(codes, n_bins, [0, 7, 13], 12, 0.05, 12)
    out["twonorm levels+missing"] = (c, b, k, y.astype(np.int32), np.zeros(1), "classes", 2)
    X, y = waveform(1500, seed=13)
    codes, n_bins = _codes(X)
    c, b, k = _levels_and_missing(codes, n_bins, [2, 9, 16], 9, 0.05, 14)
    out["waveform levels+missing"] = (c, b, k, y.astype(np.int32), np.zeros(1), "classes", 3)
    X, y = friedman1(2000, seed=15)
    codes, n_bins = _codes(X)
    out["friedman1"] = (codes, n_bins, np.zeros(10, np.uint8), np.zeros(1, np.int32), y, "regression", 1)
    c, b, k = _levels_and_missing(codes, n_bins, [1, 3, 8], 10, 0.05, 16)
    out["friedman1 levels+missing"] = (c, b, k, np.zeros(1, np.int32), y, "regression", 1)
    return out


@dataclasses.dataclass(frozen=True)
class Case:
    problem: str
    criterion: str
    features_per_split: int
    min_leaf: int = 1
    depth_limit: int | None = None
    exact_below: int = 48
    keep: bool = True
    oob: str = "class"
    draw_mean: float = 1.0  # Poisson mean of the draw counts

    @property
    def name(self) -> str:
        return ", ".join(f"{f.name}={getattr(self, f.name)}" for f in dataclasses.fields(self)
                         if getattr(self, f.name) != f.default or f.default is dataclasses.MISSING)


CASES = [
    Case("twonorm", "gini", 4),
    Case("twonorm", "entropy", 4, min_leaf=3),
    Case("twonorm", "gini", 4, depth_limit=5, oob="leaf"),
    Case("twonorm", "gini", 20, exact_below=0, draw_mean=2.0),
    Case("twonorm", "gini", 4, keep=False, oob="value"),
    Case("twonorm levels+missing", "gini", 4),
    Case("twonorm levels+missing", "entropy", 6, exact_below=10 ** 6),
    Case("waveform levels+missing", "gini", 4, oob="value"),
    Case("waveform levels+missing", "entropy", 4, min_leaf=2, depth_limit=8),
    Case("friedman1", "variance", 3, oob="value"),
    Case("friedman1", "variance", 3, min_leaf=5, oob="leaf"),
    Case("friedman1 levels+missing", "variance", 4, oob="value"),
    Case("friedman1 levels+missing", "variance", 10, depth_limit=6, keep=False, oob="value", draw_mean=2.0),
]
TREES = 2  # trees per case (members 0 and 1)


def _digest(a) -> str:
    a = np.ascontiguousarray(a)
    return hashlib.sha256(f"{a.dtype.str}{a.shape}".encode() + a.tobytes()).hexdigest()[:16]


def digests(Learner, stream_state, stream) -> dict:
    """{case name: {"member m array": sha256}} of every tree of every case, grown by Learner (the
    class of baggr.learn.tree, of this or another version) with member m's state stream_state(5, m, stream)."""
    tables = problems()
    out = {}
    for case in CASES:
        codes, n_bins, is_cat, y_class, y_value, task, n_classes = tables[case.problem]
        learner = Learner.make(codes, n_bins, is_cat, y_class, y_value, task=task, n_classes=n_classes,
                               criterion=case.criterion, features_per_split=case.features_per_split,
                               min_leaf=case.min_leaf, depth_limit=case.depth_limit, exact_below=case.exact_below)
        found = {}
        for m in range(TREES):
            weights = np.random.default_rng([17, m]).poisson(case.draw_mean, codes.shape[1]).astype(np.int32)
            g = learner.grow(weights, stream_state(5, m, stream), keep=case.keep, oob=case.oob)
            arrays = {"oob_rows": g.oob_rows, "oob_int": g.oob_int, "oob_value": g.oob_value,
                      "visits": np.array([g.visits], np.int64), "n_nodes": np.array([g.n_nodes], np.int64)}
            if g.tree is not None:
                arrays.update({f.name: np.asarray(getattr(g.tree, f.name)) for f in dataclasses.fields(g.tree)
                               if f.name != "visits"})
            found.update({f"member {m} {k}": _digest(v) for k, v in sorted(arrays.items())})
        out[case.name] = found
    return out
