"""Scoring many rows with the compact forest: row spans over threads (the kernel releases the GIL);
each row's figures add the trees in member order, so any thread count gives the same bits."""
from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor

import numpy as np

from baggr.model.compact import KINDS, Compact, Stack, parts_of
from baggr.model.predict_kernels import score_compact

BLOCK_BYTES = 1 << 18   # a block of rows' codes, row-major: it and one tree stay in L2
SPANS_PER_THREAD = 4    # spans a thread takes in turn, so a thread slowed by other work is caught up


def all_threads() -> int:
    """The cores this process may run on."""
    return len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1


def score(codes: np.ndarray, compact: Compact | Stack, *, threads: int | None = None) -> np.ndarray:
    """Summed hard votes (kind "votes") or summed leaf values or shares of all members, (n, n_out) float64.
    A Stack's parts are added one after another into the same sums: members in order, as one Compact."""
    n, p = codes.shape[1], codes.shape[0]
    threads = max(1, threads or all_threads())
    kind, n_out = KINDS[compact.kind], compact.n_out
    votes = np.zeros((n if kind == 0 else 0, n_out), np.int32)
    sums = np.zeros((0 if kind == 0 else n, n_out), np.float64)
    width = 1 << max(0, int(p - 1).bit_length())
    block = int(min(8192, max(256, BLOCK_BYTES // width)))
    has_cat = compact.has_cat
    parts = [p.arrays for p in parts_of(compact) if p.members]

    def run(lo: int, hi: int) -> None:
        for a in parts:
            score_compact(codes, lo, hi, block, a["nodes"], a["offset"], a["leaf_offset"], a["leaves"], a["shares"],
                          kind, has_cat, sums[lo:hi] if kind else sums, votes[lo:hi] if kind == 0 else votes)

    if n and compact.members:
        pieces = 1 if threads == 1 else min(threads * SPANS_PER_THREAD, -(-n // 1024))
        step = -(-n // pieces)
        spans = [(lo, min(n, lo + step)) for lo in range(0, n, step)]
        if len(spans) == 1:
            run(*spans[0])
        else:
            with ThreadPoolExecutor(max_workers=threads) as pool:
                list(pool.map(lambda s: run(*s), spans))
    return votes.astype(np.float64) if kind == 0 else sums
