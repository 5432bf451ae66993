"""Scoring many rows with a packed forest, in row chunks over threads (the kernel releases the GIL)."""
from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numpy as np

from baggr.model.forest import Forest
from baggr.model.predict_kernels import score_rows

CHUNK = 32768


def _score_range(codes, forest: Forest, lo: int, hi: int, hard: bool) -> np.ndarray:
    a = forest.arrays
    sums, votes = score_rows(codes, lo, hi, a["left"], a["right"], a["feature"], a["threshold"], a["is_cat"],
                             a["missing_left"], a["cat_masks"], a["value"], a["node_offset"], a["mask_offset"], hard)
    return votes.astype(np.float64) if hard else sums


def score(codes: np.ndarray, forest: Forest, *, hard: bool, threads: int = 1) -> np.ndarray:
    """Summed hard votes (hard) or summed leaf values of all members, (n, n_out) float64."""
    n = codes.shape[1]
    spans = [(s, min(n, s + CHUNK)) for s in range(0, n, CHUNK)]
    if len(spans) <= 1 or threads <= 1:
        parts = [_score_range(codes, forest, lo, hi, hard) for lo, hi in spans]
    else:
        with ThreadPoolExecutor(max_workers=threads) as pool:
            parts = list(pool.map(lambda s: _score_range(codes, forest, s[0], s[1], hard), spans))
    return np.concatenate(parts) if parts else np.zeros((0, forest.n_out))
