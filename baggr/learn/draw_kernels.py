"""numba kernels for the per-member draw counts (how often each row is drawn)."""
import numpy as np

from baggr.jit import kernel
from baggr.learn.rng import below, uniform


@kernel
def bootstrap_counts(n_rows, n_draws, state, out):
    """n_draws rows with replacement out of n_rows: out[r] += 1 per draw (out starts at zero)."""
    for _ in range(n_draws):
        out[below(state, n_rows)] += 1


@kernel
def balanced_counts(rows_by_class, class_start, per_class, state, out):
    """per_class draws with replacement from every class; rows_by_class[class_start[k]:class_start[k+1]] are class k's rows."""
    for k in range(class_start.shape[0] - 1):
        lo = class_start[k]
        size = class_start[k + 1] - lo
        for _ in range(per_class):
            out[rows_by_class[lo + below(state, size)]] += 1


@kernel
def subsample_counts(n_rows, n_take, state, out):
    """n_take distinct rows without replacement, by selection sampling (Knuth, TAOCP vol. 2, Algorithm S)."""
    taken = 0
    for r in range(n_rows):
        if (n_rows - r) * uniform(state) < n_take - taken:
            out[r] = 1
            taken += 1
            if taken == n_take:
                break
