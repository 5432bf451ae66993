"""Slow, obvious reference versions of the kernels, for the tests to compare against.

Each section belongs to one part of the engine; keep them plain Python / numpy.
"""
import itertools

import numpy as np

# ## trees ---------------------------------------------------------------------------------------
# Impurities from their textbook definitions (Breiman, Friedman, Olshen & Stone 1984,
# Classification and Regression Trees, ch. 4 and 8) and a brute-force search over every
# binary split of one node: every threshold of a numeric feature, every subset of the levels
# of a categorical one, with the missing code (255) tried on both sides.

MISSING = 255


def gini(counts) -> float:
    """Gini index 1 - sum p_k^2 of (weighted) class counts."""
    c = np.asarray(counts, dtype=float)
    w = c.sum()
    return 0.0 if w <= 0 else float(1.0 - ((c / w) ** 2).sum())


def entropy_bits(counts) -> float:
    """Shannon entropy -sum p_k log2 p_k in bits of (weighted) class counts."""
    c = np.asarray(counts, dtype=float)
    w = c.sum()
    if w <= 0:
        return 0.0
    p = c[c > 0] / w
    return float(-(p * np.log2(p)).sum())


def weighted_variance(y, w) -> float:
    """Weighted mean squared deviation from the weighted mean."""
    y = np.asarray(y, float)
    w = np.asarray(w, float)
    if w.sum() <= 0:
        return 0.0
    mu = (w * y).sum() / w.sum()
    return float((w * (y - mu) ** 2).sum() / w.sum())


def node_impurity(rows, y_class, y_value, weights, task, n_classes, criterion) -> float:
    """Impurity of the in-bag rows `rows` with draw-count weights."""
    w = weights[rows]
    if task == "regression":
        return weighted_variance(y_value[rows], w)
    counts = np.bincount(y_class[rows], weights=w, minlength=n_classes)
    return gini(counts) if criterion == "gini" else entropy_bits(counts)


def split_score(left, right, y_class, y_value, weights, task, n_classes, criterion) -> float:
    """w_L * imp(L) + w_R * imp(R)."""
    return sum(weights[s].sum() * node_impurity(s, y_class, y_value, weights, task, n_classes, criterion)
               for s in (left, right))


def brute_force_splits(codes, n_bins, is_cat, y_class, y_value, weights, rows, *, task, n_classes,
                       criterion, min_leaf):
    """Every valid binary split of the node `rows` (in-bag rows only): list of (score, feature, left rows).

    Numeric: left = code <= t for t in -1..n_bins-1; categorical: left = any subset of the levels
    present; missing rows to the left or the right. Both children need draw weight >= min_leaf.
    """
    rows = np.asarray([r for r in rows if weights[r] > 0])
    out = []
    for f in range(codes.shape[0]):
        if n_bins[f] <= 1:
            continue
        c = codes[f, rows].astype(int)
        miss = c == MISSING
        sides = (True, False) if miss.any() else (False,)
        if is_cat[f]:
            levels = sorted(set(c[~miss].tolist()))
            tests = [set(s) for r in range(len(levels) + 1) for s in itertools.combinations(levels, r)]
            goes = [np.isin(c, sorted(s)) & ~miss for s in tests]
        else:
            # t = -1 and t = n_bins - 1 put every non-missing row on one side: "missing vs the rest"
            goes = [(c <= t) & ~miss for t in range(-1, n_bins[f])]
        seen = set()
        for g in goes:
            for mleft in sides:
                gl = g | (miss & mleft)
                key = tuple(rows[gl].tolist())
                if key in seen:
                    continue
                seen.add(key)
                left, right = rows[gl], rows[~gl]
                if weights[left].sum() < min_leaf or weights[right].sum() < min_leaf:
                    continue
                s = split_score(left, right, y_class, y_value, weights, task, n_classes, criterion)
                out.append((s, f, frozenset(left.tolist())))
    return out


def goes_left(code, node, tree) -> bool:
    """Whether a code goes left at an internal node of a Tree (one rule at a time)."""
    if code == MISSING:
        return bool(tree.missing_left[node])
    if tree.is_cat[node]:
        word = int(tree.cat_masks[tree.threshold[node], code // 64])
        return bool((word >> (code % 64)) & 1)
    return code <= tree.threshold[node]


def path(codes, row, tree) -> list:
    """Nodes visited by one row from the root to its leaf."""
    node, seen = 0, [0]
    while tree.left[node] >= 0:
        code = int(codes[tree.feature[node], row])
        node = int(tree.left[node] if goes_left(code, node, tree) else tree.right[node])
        seen.append(node)
    return seen


def route(codes, rows, tree) -> np.ndarray:
    """Leaf reached by each row."""
    return np.array([path(codes, r, tree)[-1] for r in rows], dtype=np.int64)


def node_depths(tree) -> np.ndarray:
    """Depth of every node (root 0) from the child links."""
    depth = np.full(tree.n_nodes, -1)
    depth[0] = 0
    for v in range(tree.n_nodes):
        if tree.left[v] >= 0:
            depth[tree.left[v]] = depth[tree.right[v]] = depth[v] + 1
    return depth


def recount(codes, tree, weights):
    """(distinct in-bag rows, draw weight, in-bag rows) of every node, by routing each in-bag row."""
    n_rows = np.zeros(tree.n_nodes, np.int64)
    weight = np.zeros(tree.n_nodes, np.int64)
    members = [[] for _ in range(tree.n_nodes)]
    for r in np.flatnonzero(weights > 0):
        for v in path(codes, r, tree):
            n_rows[v] += 1
            weight[v] += weights[r]
            members[v].append(int(r))
    return n_rows, weight, members


# ## data ----------------------------------------------------------------------------------------
# The bin code of a value by its definition (the number of edges at or below it), one value at a
# time, and the real data file the table tests read.

def bin_code(value: float, edges) -> int:
    """Code of one numeric value: 255 if NaN, else how many edges are <= value."""
    if value != value:
        return MISSING
    return sum(1 for e in edges if e <= value)


def penguins_csv_path():
    """Path of palmerpenguins' penguins.csv, found without importing the package (it imports pandas)."""
    import importlib.metadata
    for f in importlib.metadata.files("palmerpenguins") or []:
        if str(f).replace("\\", "/").endswith("data/penguins.csv"):
            return f.locate()
    raise FileNotFoundError("palmerpenguins' penguins.csv is not installed")


# ## runs, report ------------------------------------------------------------------------------
# The early-stop rule, the "settled at" size and the OOB error rate written out from their
# definitions, one ensemble size at a time; Wilson's interval from its formula (Wilson 1927,
# "Probable inference, the law of succession, and statistical inference", JASA 22, eq. for the
# score interval).

def stable_rule(needed, m, min_members=32, refits=3, spread=0.1, slack=16) -> bool:
    """True when after m members the last `refits` refits made at min_members members or later (and
    not after m) all put members_needed within +-max(spread N, slack) of the latest one, N, and m >= N."""
    seen = [(a, b) for a, b in needed if min_members <= a <= m]
    if len(seen) < refits:
        return False
    n = seen[-1][1]
    return n >= 1 and m >= n and all(b >= 1 and abs(b - n) <= max(spread * n, slack) for _, b in seen[-refits:])


def settled_at(curve, lo, hi):
    """Smallest size s (1-based) with lo <= curve[k] <= hi for every k >= s - 1; None if the last point is outside."""
    for s in range(1, len(curve) + 1):
        if all(lo <= curve[k] <= hi for k in range(s - 1, len(curve))):
            return s
    return None


def oob_error_rate(pred, y) -> float:
    """Share of rows with an OOB prediction (not None) whose prediction differs from the true label."""
    pairs = [(p, t) for p, t in zip(pred, y) if p is not None]
    return sum(p != t for p, t in pairs) / len(pairs)


def wilson_interval(k: int, n: int, z: float = 1.959963984540054):
    """Wilson score interval for k successes in n trials."""
    import math
    p = k / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z / (1 + z * z / n) * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    return centre - half, centre + half
