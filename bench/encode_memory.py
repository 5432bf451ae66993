"""Peak memory and time of fit_schema + fit_binning + encode on a 1,000,000 x 50 float64 numpy table.

Prints the peak resident memory above the baseline (taken after building the input) as a share of the
input's size, with and without the uint8 codes themselves (1/8 of a float64 input).
    python bench/encode_memory.py [rows] [features]
"""
import sys
import time
from pathlib import Path

import numpy as np
import psutil

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # runs from a checkout without installing
from baggr.data import encode, fit_binning, fit_schema, read_table
from util import PeakRSS


def main(n=1_000_000, p=50):
    rng = np.random.default_rng(1)
    X = np.empty((n, p))
    for j in range(p):  # built column by column so no temporary inflates the baseline
        X[:, j] = rng.standard_normal(n)
    X[rng.random(n) < 0.05, 3] = np.nan
    X[:, 7] = np.round(X[:, 7] * 2)                  # a few distinct values: one bin per value
    y = (X[:, 0] + X[:, 1] > 0).astype(np.int32)
    size = X.nbytes
    # Warm up on a tiny table first: loading numba's compiled kernel costs a fixed few tens of MiB,
    # paid once per process whatever the table's size (training pays it anyway for the trees).
    before = psutil.Process().memory_info().rss
    small = X[:1000]
    s0, _ = fit_schema(small, y[:1000])
    encode(small, s0, fit_binning(small, s0))
    base = psutil.Process().memory_info().rss
    print(f"warm-up (pyarrow compute, numba runtime and kernel load): {(base - before) / 2**20:.0f} MiB, once")
    t0 = time.perf_counter()
    with PeakRSS() as peak:
        table = read_table(X)
        t1 = time.perf_counter()
        schema, targets = fit_schema(table, y)
        t2 = time.perf_counter()
        binning = fit_binning(table, schema)
        t3 = time.perf_counter()
        codes = encode(table, schema, binning)
        t4 = time.perf_counter()
    extra = peak.peak - base
    print(f"input {n:,} x {p} float64: {size / 2**20:.0f} MiB; codes {codes.nbytes / 2**20:.0f} MiB, "
          f"targets {targets.nbytes / 2**20:.0f} MiB")
    print(f"peak RSS above baseline: {extra / 2**20:.0f} MiB = {100 * extra / size:.1f}% of the input "
          f"({100 * (extra - codes.nbytes - targets.nbytes) / size:.1f}% besides codes and targets)")
    print(f"time: read_table {t1 - t0:.3f} s, fit_schema {t2 - t1:.3f} s, fit_binning {t3 - t2:.3f} s, "
          f"encode {t4 - t3:.3f} s, total {t4 - t0:.3f} s")
    print(f"bins per feature: min {binning.n_bins.min()}, max {binning.n_bins.max()}; "
          f"missing codes in x3: {(codes[3] == 255).mean():.3f}")


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
