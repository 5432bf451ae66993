"""R1 speed: grow full trees on twonorm and compare the time per visit with bare histogram loops.

twonorm (Breiman 1996, "Bias, variance and arcing classifiers"): 20 features, class 0 ~ N(-a, I),
class 1 ~ N(+a, I), a = 2 / sqrt(20). 100,000 rows, 255 quantile bins per feature, bootstrap
draws, full trees (min_leaf 1, no depth limit), Gini, features_per_split 4.

    python bench/tree_speed.py [--rows 100000] [--members 6] [--threads 1] [--exact-below 48]

Prints the first call (compile or cache load), seconds per tree, visits, ns per visit, and two
calibrations over the same number of visits, each doing only the histogram update:
  root:   the root's rows (dense, ascending), as DESIGN.md's performance model measures it;
  replay: every internal node's own rows and candidate count, so the same gathers (scattered
          rows in deep nodes) as the tree; the rest of member_time is split search and partition.
Times are thread CPU times, best of several rounds, calibration interleaved with the trees, so
that other load on the machine inflates both alike.
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
from baggr.learn.rng import STREAM_TREE, stream_state  # noqa: E402
from baggr.learn.tree import grow  # noqa: E402


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


def bootstrap(n, m):
    """Bootstrap draw counts of member m (n draws with replacement from n rows)."""
    rng = np.random.default_rng([2024, m])
    return np.bincount(rng.integers(0, n, n), minlength=n).astype(np.int32)


@kernel
def histogram_root(codes, feats, idx, lab, wt, visits):
    """Bare histogram updates over the root's rows, feature after feature, until `visits` are done."""
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


@kernel
def node_members(codes, weights, left, right, feature, threshold, n_nodes):
    """In-bag rows of every node (numeric splits only), ascending: CSR offsets and rows."""
    count = np.zeros(n_nodes + 1, np.int64)
    for r in range(codes.shape[1]):
        if weights[r] > 0:
            v = 0
            while True:
                count[v + 1] += 1
                if left[v] < 0:
                    break
                c = codes[feature[v], r]
                v = left[v] if (c != 255 and c <= threshold[v]) else right[v]
    off = np.cumsum(count)
    rows = np.empty(off[-1], np.int32)
    fill = off[:-1].copy()
    for r in range(codes.shape[1]):
        if weights[r] > 0:
            v = 0
            while True:
                rows[fill[v]] = r
                fill[v] += 1
                if left[v] < 0:
                    break
                c = codes[feature[v], r]
                v = left[v] if (c != 255 and c <= threshold[v]) else right[v]
    return off, rows


@kernel
def histogram_replay(codes, left, candidates, off, rows, lab, wt, feats):
    """Bare histogram updates over each internal node's rows, candidates[node] features each.

    lab, wt: class and draw count per position of rows. Each node's rows are first copied to a
    small buffer with their class and weight aligned, as the tree keeps them.
    """
    hist = np.zeros(512, np.int64)
    b_rows = np.empty(off[1] - off[0], np.int32)
    b_lab = np.empty(off[1] - off[0], np.int32)
    b_wt = np.empty(off[1] - off[0], np.int64)
    seen = np.empty(off[1] - off[0], np.int64)
    check = 0
    j = 0
    for v in range(left.shape[0]):
        if left[v] < 0:
            continue
        m = off[v + 1] - off[v]
        for t in range(m):
            b_rows[t] = rows[off[v] + t]
            b_lab[t] = lab[off[v] + t]
            b_wt[t] = wt[off[v] + t]
        for c in range(candidates[v]):
            codes_f = codes[feats[j % feats.shape[0]]]
            j += 1
            for t in range(m):
                b = np.int64(codes_f[b_rows[t]]) * 2
                seen[t] = b
                hist[b + b_lab[t]] += b_wt[t]
            check += hist[7]
            if m < 256:  # zero again only the bins touched, as the tree does on small nodes
                for t in range(m):
                    hist[seen[t]] = 0
                    hist[seen[t] + 1] = 0
            else:
                for b in range(512):
                    hist[b] = 0
    return check


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=100_000)
    ap.add_argument("--members", type=int, default=6)
    ap.add_argument("--rounds", type=int, default=4)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--exact-below", type=int, default=48)
    args = ap.parse_args()

    x, y = twonorm(args.rows)
    codes, n_bins = quantile_codes(x)
    is_cat = np.zeros(codes.shape[0], np.uint8)
    n = args.rows
    draws = [bootstrap(n, m) for m in range(args.members + 1)]

    def one(m):
        t0, c0 = time.perf_counter(), time.thread_time()
        tree = grow(codes, n_bins, is_cat, y, np.zeros(1), draws[m], task="classes", n_classes=2,
                    criterion="gini", features_per_split=4, min_leaf=1, depth_limit=None,
                    rng_state=stream_state(7, m, STREAM_TREE), exact_below=args.exact_below)
        return time.perf_counter() - t0, time.thread_time() - c0, tree

    first, _, _ = one(0)
    print(f"first call (compile, or load from the cache, + one tree): {first:.2f} s")

    members = range(1, args.members + 1)
    cpu = {m: np.inf for m in members}
    trees = {}
    cal_root = cal_replay = np.inf  # per visit, measured on member 1's tree
    feats = np.random.default_rng(3).integers(0, codes.shape[0], 4096).astype(np.int64)
    w1 = draws[1]
    idx = np.flatnonzero(w1 > 0).astype(np.int32)
    lab, wt = y[idx].astype(np.int32), w1[idx].astype(np.int64)
    histogram_root(codes, feats, idx, lab, wt, 1000)  # compile
    wall = []
    for _ in range(args.rounds):
        t0 = time.perf_counter()
        with ThreadPoolExecutor(max_workers=args.threads) as pool:
            for m, (dt, ct, tree) in zip(members, pool.map(one, members)):
                cpu[m] = min(cpu[m], ct)
                trees[m] = tree
        wall.append((time.perf_counter() - t0) / args.members)
        t = trees[1]
        c0 = time.thread_time()
        histogram_root(codes, feats, idx, lab, wt, t.visits)
        cal_root = min(cal_root, (time.thread_time() - c0) / t.visits)
        off, rows = node_members(codes, w1, t.left, t.right, t.feature, t.threshold, t.n_nodes)
        r_lab, r_wt = y[rows].astype(np.int32), w1[rows].astype(np.int64)
        c0 = time.thread_time()
        histogram_replay(codes, t.left, t.candidates, off, rows, r_lab, r_wt, feats)
        cal_replay = min(cal_replay, (time.thread_time() - c0) / t.visits)

    sec = float(np.mean([cpu[m] for m in members]))
    visits = float(np.mean([trees[m].visits for m in members]))
    t1 = trees[1]
    ns = sec / visits * 1e9
    print(f"R1 twonorm: {n} rows x {codes.shape[0]} features, full trees, features_per_split 4, "
          f"exact_below {args.exact_below}, threads {args.threads}")
    print(f"seconds per tree (thread CPU, best of {args.rounds}): {sec:.4f}   wall per tree: {min(wall):.4f}")
    print(f"nodes per tree: {np.mean([t.n_nodes for t in trees.values()]):.0f}   "
          f"distinct in-bag rows: {t1.n_rows[0]}")
    print(f"visits per tree: {visits:.0f}   ns per visit: {sec / visits * 1e9:.3f}")
    print(f"calibration, root rows:   {cal_root * 1e9:.3f} ns/visit   "
          f"ratio member_time / (visits * calibration): {ns / (cal_root * 1e9):.2f}")
    print(f"calibration, node replay: {cal_replay * 1e9:.3f} ns/visit   "
          f"ratio member_time / (visits * calibration): {ns / (cal_replay * 1e9):.2f}")


if __name__ == "__main__":
    main()
