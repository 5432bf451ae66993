"""Per-member draw counts: member m's counts depend only on (seed, m) and the data's size and classes."""
from __future__ import annotations

import numpy as np

from baggr.learn import draw_kernels as k
from baggr.learn.rng import STREAM_DRAW, stream_state


class Drawer:
    """Makes the draw counts of any member for one training set."""

    def __init__(self, scheme: str, n_rows: int, seed: int, *, fraction: float = 0.632, y_class=None):
        self.scheme, self.n_rows, self.seed = scheme, int(n_rows), int(seed)
        self.n_take = max(1, min(self.n_rows - 1, int(round(fraction * self.n_rows)))) if self.n_rows > 1 else 1
        if scheme == "balanced":
            y = np.asarray(y_class, dtype=np.int64)
            counts = np.bincount(y)
            present = counts[counts > 0]
            # Chen, Liaw & Breiman (2004): draw as many rows from every class as the smallest class holds.
            self.per_class = int(present.min())
            order = np.argsort(y, kind="stable")
            self.rows_by_class = order[np.isin(y[order], np.flatnonzero(counts))].astype(np.int64)
            self.class_start = np.concatenate([[0], np.cumsum(present)]).astype(np.int64)

    def counts(self, member: int) -> np.ndarray:
        """int32 draw count per row for member m (0 = out of bag)."""
        return self.counts_into(member, np.zeros(self.n_rows, dtype=np.int32))

    def counts_into(self, member: int, out: np.ndarray) -> np.ndarray:
        """Member m's draw counts written into out (int32, n_rows; any contents): a reused buffer."""
        out[:] = 0
        state = stream_state(self.seed, member, STREAM_DRAW)
        if self.scheme == "bootstrap":
            k.bootstrap_counts(self.n_rows, self.n_rows, state, out)
        elif self.scheme == "balanced":
            k.balanced_counts(self.rows_by_class, self.class_start, self.per_class, state, out)
        else:
            k.subsample_counts(self.n_rows, self.n_take, state, out)
        return out
