"""R1 speed: grow full trees on twonorm and compare the time per visit with a bare histogram loop.

twonorm (Breiman 1996, "Bias, variance and arcing classifiers"): 20 features, class 0 ~ N(-a, I),
class 1 ~ N(+a, I), a = 2 / sqrt(20). 100,000 rows, 255 quantile bins per feature, bootstrap
draws, full trees (min_leaf 1, no depth limit), features_per_split 4.

    python bench/tree_speed.py [--rows 100000] [--members 5] [--threads 1]

Prints seconds per tree, visits, ns per visit, the calibration kernel's ns per visit (the
histogram update alone over the same number of gathered (row, feature) visits) and their ratio.
"""
from __future__ import annotations

import argparse
import os
import sys
import time
from concurrent.futures import ThreadPoolExecutor

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))

from baggr.jit import kernel  # noqa: E402
from baggr.rng import STREAM_TREE, stream_state  # noqa: E402
from baggr.tree import grow  # noqa: E402


def twonorm(n: int, p: int = 20, seed: int = 1996):
    """Rows of twonorm and their class, from a fixed seed."""
    rng = np.random.default_rng(seed)
    y = rng.integers(0, 2, n).astype(np.int32)
    a = 2.0 / np.sqrt(p)
    x = rng.standard_normal((n, p)) + np.where(y[:, None] == 1, a, -a)
    return x, y


def quantile_codes(x, bins: int = 255):
    """Feature-major uint8 codes from quantile edges (bins - 1 inner edges per feature)."""
    n, p = x.shape
    codes = np.empty((p, n), np.uint8)
    n_bins = np.empty(p, np.int32)
    for f in range(p):
        edges = np.unique(np.quantile(x[:, f], np.linspace(0, 1, bins + 1)[1:-1]))
        codes[f] = np.searchsorted(edges, x[:, f], side="right")
        n_bins[f] = len(edges) + 1
    return codes, n_bins


@kernel
def histogram_only(codes, feats, idx, lab, wt, visits):
    """Bare histogram updates over gathered rows, feature after feature, until `visits` are done."""
    hist = np.zeros(512, np.int64)
    done = 0
    check = 0
    j = 0
    while done < visits:
        codes_f = codes[feats[j % feats.shape[0]]]
        j += 1
        m = min(idx.shape[0], visits - done)
        for i in range(m):
            hist[np.int64(codes_f[idx[i]]) * 2 + lab[i]] += wt[i]
        done += m
        check += hist[7]
        for b in range(512):
            hist[b] = 0
    return check


def bootstrap(n, m):
    """Bootstrap draw counts of member m (n draws with replacement from n rows)."""
    rng = np.random.default_rng([2024, m])
    return np.bincount(rng.integers(0, n, n), minlength=n).astype(np.int32)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=100_000)
    ap.add_argument("--members", type=int, default=5)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--exact-below", type=int, default=48)
    args = ap.parse_args()

    x, y = twonorm(args.rows)
    codes, n_bins = quantile_codes(x)
    is_cat = np.zeros(codes.shape[0], np.uint8)
    n = args.rows

    def one(m):
        w = bootstrap(n, m)
        t0 = time.perf_counter()
        tree = grow(codes, n_bins, is_cat, y, np.zeros(1), w, task="classes", n_classes=2, criterion="gini",
                    features_per_split=4, min_leaf=1, depth_limit=None,
                    rng_state=stream_state(7, m, STREAM_TREE), exact_below=args.exact_below)
        return time.perf_counter() - t0, tree

    t0 = time.perf_counter()
    first, _ = one(0)
    print(f"first call (compile or cache load + one tree): {first:.2f} s")

    times, visits, nodes, rows_in = [], [], [], []
    t_wall = time.perf_counter()
    with ThreadPoolExecutor(max_workers=args.threads) as pool:
        for dt, tree in pool.map(one, range(1, args.members + 1)):
            times.append(dt)
            visits.append(tree.visits)
            nodes.append(tree.n_nodes)
            rows_in.append(int(tree.n_rows[0]))
    wall = time.perf_counter() - t_wall
    sec = float(np.mean(times))
    v = float(np.mean(visits))
    ns = sec / v * 1e9
    inner = sum(int((tree.left >= 0).sum()) for tree in [tree])
    print(f"R1 twonorm: {n} rows x {codes.shape[0]} features, full trees, features_per_split 4, "
          f"threads {args.threads}")
    print(f"seconds per tree:   {sec:.4f}  (wall {wall / args.members:.4f} per tree over {args.members})")
    print(f"nodes per tree:     {np.mean(nodes):.0f}   (last tree: {inner} internal), "
          f"distinct in-bag rows {np.mean(rows_in):.0f}")
    print(f"visits per tree:    {v:.0f}")
    print(f"ns per visit:       {ns:.3f}")

    # calibration: the same number of visits, root rows gathered (ascending), random features
    w = bootstrap(n, 1)
    idx = np.flatnonzero(w > 0).astype(np.int32)
    lab = y[idx].astype(np.int32)
    wt = w[idx].astype(np.int64)
    feats = np.random.default_rng(3).integers(0, codes.shape[0], 1000).astype(np.int64)
    histogram_only(codes, feats, idx, lab, wt, 1000)  # compile
    best = np.inf
    for _ in range(3):
        c0 = time.perf_counter()
        histogram_only(codes, feats, idx, lab, wt, int(v))
        best = min(best, time.perf_counter() - c0)
    cal = best / v * 1e9
    print(f"calibration ns/visit (histogram update only): {cal:.3f}")
    print(f"ratio member_time / (visits * calibration):   {sec / (v * best / v):.2f}")
    print(f"total bench time: {time.perf_counter() - t0:.1f} s")


if __name__ == "__main__":
    main()
