"""Where an R1 tree's split search time goes, by node size (rows), against its visits.

Grows full trees on R1 (twonorm 100,000 x 20, features_per_split 4, as tree_speed.py), then
replays each internal node's split search with the tree's own kernels (build_classes,
list_classes, scan_two, clear_classes; the exact path below 48 rows, as the tree) over the node's
own in-bag rows, classes and draw counts, its candidate count, features drawn at random. Nodes of
two rows are left out (the tree judges them from their two codes, no histogram). For each band of
node sizes it prints the nodes, their share of the tree's visits, and the replay time split into
the histogram build (with its clear) and listing + scanning the codes, as a share of the tree's
own time; what the replay leaves out (partitions, node records, feature draws, two-row nodes) is
the rest of the tree.

    python bench/node_bands.py [--members 4] [--rounds 3]
"""
from __future__ import annotations

import argparse
import os
import sys
import time

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))

from baggr.learn.hist_kernels import build_classes, clear_classes, list_classes  # noqa: E402
from baggr.jit import kernel  # noqa: E402
from baggr.learn.rng import STREAM_TREE, stream_state  # noqa: E402
from baggr.learn.split_kernels import scan_two  # noqa: E402
from baggr.learn.tree import grow  # noqa: E402
from tree_speed import bootstrap, node_members, quantile_codes, twonorm  # noqa: E402

BANDS = ((3, 48), (48, 256), (256, 4096), (4096, 1 << 30))
EXACT_BELOW = 48


@kernel
def replay(codes, rows2, lw2, off, nodes, cand, feats, scan, hist, bits, pc, work, cl, cnt):
    """The split search of each node in `nodes` (internal, ascending rows at rows2[0, off[v]:off[v+1]]).

    scan=False: only build and clear each candidate's histogram; cnt[v]: the node's class weights.
    """
    acc = 0.0
    j = 0
    batch = np.zeros(hist.shape[0], np.int64)
    for t in range(nodes.shape[0]):
        v = nodes[t]
        lo = off[v]
        hi = off[v + 1]
        sparse = hi - lo < EXACT_BELOW
        k = min(cand[v], hist.shape[0])  # one build call for the node's candidates, as the tree
        for c in range(k):
            batch[c] = feats[j % feats.shape[0]]
            j += 1
        build_classes(codes, rows2, lw2, 0, 1, lo, hi, 2, batch, k, sparse, hist, bits)
        for c in range(k):
            J = 0
            if scan or sparse:  # the exact path's bit map is read (and cleared) by the listing
                J = list_classes(hist, c, 255, 2, sparse, bits, pc)
            if scan:
                ma = np.float64(hist[c, 2 * 255])
                mb = np.float64(hist[c, 2 * 255 + 1])
                sc, pos, ml = scan_two(hist, c, J, pc, cnt[v, 0] - ma, cnt[v, 1] - mb, ma, mb, 0, 1.0,
                                       1e300, work, cl)
                acc += sc
            clear_classes(hist, c, J, pc, 2, sparse)
    return acc


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--members", type=int, default=4)
    ap.add_argument("--rounds", type=int, default=3)
    args = ap.parse_args()

    x, y = twonorm(100_000)
    codes, n_bins = quantile_codes(x)
    is_cat = np.zeros(codes.shape[0], np.uint8)
    feats = np.random.default_rng(3).integers(0, codes.shape[0], 4096).astype(np.int64)
    hist = np.zeros((8, 512), np.int32)
    bits = np.zeros((8, 4), np.uint64)
    pc = np.zeros(256, np.int32)
    work = np.empty((5, 256), np.float64)
    cl = np.zeros(2, np.float64)

    tree_s, visits = 0.0, 0
    band_vis = np.zeros(len(BANDS))
    band_nodes = np.zeros(len(BANDS))
    build_s = np.zeros(len(BANDS))
    scan_s = np.zeros(len(BANDS))
    for m in range(1, args.members + 1):
        w = bootstrap(codes.shape[1], m)

        def one():
            return grow(codes, n_bins, is_cat, y, np.zeros(1), w, task="classes", n_classes=2,
                        criterion="gini", features_per_split=4, min_leaf=1, depth_limit=None,
                        rng_state=stream_state(7, m, STREAM_TREE), exact_below=EXACT_BELOW)
        one()  # compile or load
        t = one()
        off, rows = node_members(codes, w, t.left, t.right, t.feature, t.threshold, t.n_nodes)
        rows2 = rows[None, :].copy()
        lw2 = ((w[rows].astype(np.int32) << 1) | y[rows].astype(np.int32))[None, :].copy()
        cnt = np.zeros((t.n_nodes, 2), np.float64)
        for v in np.flatnonzero(t.left >= 0):
            rv = rows[off[v]:off[v + 1]]
            cnt[v, 0] = w[rv][y[rv] == 0].sum()
            cnt[v, 1] = w[rv][y[rv] == 1].sum()
        internal = t.left >= 0
        sizes = t.n_rows
        best_tree = np.inf
        best_b = np.full(len(BANDS), np.inf)
        best_s = np.full(len(BANDS), np.inf)
        for _ in range(args.rounds):
            c0 = time.thread_time()
            one()
            best_tree = min(best_tree, time.thread_time() - c0)
            for b, (lo, hi) in enumerate(BANDS):
                nodes = np.flatnonzero(internal & (sizes >= lo) & (sizes < hi)).astype(np.int64)
                for scan, best in ((False, best_b), (True, best_s)):
                    c0 = time.thread_time()
                    replay(codes, rows2, lw2, off, nodes, t.candidates, feats, scan, hist, bits, pc, work, cl, cnt)
                    best[b] = min(best[b], time.thread_time() - c0)
        tree_s += best_tree
        visits += t.visits
        for b, (lo, hi) in enumerate(BANDS):
            s = internal & (sizes >= lo) & (sizes < hi)
            band_nodes[b] += s.sum()
            band_vis[b] += (sizes[s].astype(np.int64) * t.candidates[s]).sum()
        build_s += best_b
        scan_s += best_s - best_b

    k = args.members
    print(f"R1 twonorm, {k} trees: {tree_s / k * 1e3:.2f} ms a tree (thread CPU, best of {args.rounds}), "
          f"{visits / k:.0f} visits")
    print(f"{'node rows':>12} {'nodes':>7} {'visits':>7} {'build':>7} {'list+scan':>10}   (shares of the tree's time)")
    for b, (lo, hi) in enumerate(BANDS):
        name = f"{lo}-{hi - 1}" if hi < (1 << 30) else f">={lo}"
        print(f"{name:>12} {band_nodes[b] / k:7.0f} {band_vis[b] / visits:7.1%} "
              f"{build_s[b] / tree_s:7.1%} {scan_s[b] / tree_s:10.1%}")
    rest = 1 - (build_s.sum() + scan_s.sum()) / tree_s
    print(f"{'all':>12} {band_nodes.sum() / k:7.0f} {band_vis.sum() / visits:7.1%} "
          f"{build_s.sum() / tree_s:7.1%} {scan_s.sum() / tree_s:10.1%}   rest of the tree "
          f"(partitions, records, draws, two-row nodes): {rest:.1%}")


if __name__ == "__main__":
    main()
