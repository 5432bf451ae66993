"""Scoring many rows with a packed forest, in row chunks over threads."""
from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import numpy as np

from .forest import Forest
from .predict_kernels import route

CHUNK = 65536


def _score_rows(codes, forest: Forest, rows, hard: bool) -> np.ndarray:
    a = forest.arrays
    out = np.zeros((rows.shape[0], forest.n_out), np.float64)
    for m in range(forest.members):
        n0, n1 = a["node_offset"][m], a["node_offset"][m + 1]
        k0, k1 = a["mask_offset"][m], a["mask_offset"][m + 1]
        leaves = route(codes, rows, a["left"][n0:n1], a["right"][n0:n1], a["feature"][n0:n1],
                       a["threshold"][n0:n1], a["is_cat"][n0:n1], a["missing_left"][n0:n1], a["cat_masks"][k0:k1])
        val = a["value"][n0:n1][leaves]
        if hard:
            out[np.arange(rows.shape[0]), np.argmax(val, axis=1)] += 1.0
        else:
            out += val
    return out


def score(codes: np.ndarray, forest: Forest, *, hard: bool, threads: int = 1) -> np.ndarray:
    """Summed votes (hard) or summed leaf values of all members, (n, n_out)."""
    n = codes.shape[1]
    chunks = [np.arange(s, min(n, s + CHUNK), dtype=np.int32) for s in range(0, n, CHUNK)]
    if len(chunks) <= 1 or threads <= 1:
        parts = [_score_rows(codes, forest, c, hard) for c in chunks]
    else:
        with ThreadPoolExecutor(max_workers=threads) as pool:
            parts = list(pool.map(lambda c: _score_rows(codes, forest, c, hard), chunks))
    return np.concatenate(parts) if parts else np.zeros((0, forest.n_out))
