"""R2 scale (DESIGN.md): 1,000,000 rows x 50 features, estimate-only, 64 members.

Prints peak RSS above what the process held after importing baggr and building the input, as a
share of the input array's size, for two member counts (it must be flat in members), with a depth
limit when one is given (0: none).
    python bench/scale.py [members] [rows] [depth_limit]
"""
import os
import sys
import time

import numpy as np

import baggr
from util import PeakRSS, mib


def main(members=64, n=1_000_000, depth=0, p=50):
    print(time.strftime("%Y-%m-%d"), os.uname().machine, f"{os.cpu_count()} cores")
    rng = np.random.default_rng(2)
    X = np.empty((n, p))
    for j in range(p):  # column by column: no temporary inflates the baseline
        X[:, j] = rng.standard_normal(n)
    y = ((X[:, 0] + X[:, 1] * X[:, 2] + 0.5 * rng.standard_normal(n)) > 0).astype(np.int32)
    baggr.train(X[:5000], y[:5000], baggr.Config(members=2, keep_members=False))  # load the kernels
    for m in sorted({max(2, members // 4), members}):
        with PeakRSS() as rss:
            t0 = time.perf_counter()
            ens = baggr.train(X, y, baggr.Config(members=m, keep_members=False, seed=1, depth_limit=depth or None))
            wall = time.perf_counter() - t0
        extra = rss.peak - rss.start
        print(f"R2 {n:,} x {p}, estimate-only, depth limit {depth or 'none'}, {m} members: {wall:.1f} s ({m / wall:.2f} members/s), "
              f"OOB error {ens.oob.error:.4f}; peak RSS above baseline {mib(extra)} = "
              f"{extra / X.nbytes * 100:.1f}% of the input ({mib(X.nbytes)})")


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:]))
