"""A long curve cut down to the points a plot of a given width can show, keeping each bucket's
extremes; complete buckets are remembered between calls. Pure Python.
"""
from __future__ import annotations

import math
from bisect import bisect_left


def bucket_plan(xs, width: int, log: bool = False) -> tuple:
    """How to cut a curve of len(xs) points into buckets for `width` points of drawing.

    Linear: runs of s points, s a power of two. Log: spans of 1/r decade of x, r a power of two.
    Sizes are powers of two so that buckets once complete stay the same as the curve grows
    (their extremes can be kept). Returns (kind, size).
    """
    n = len(xs)
    buckets = max(1, (int(width) - 2) // 2)
    if log and n and xs[0] >= 1:
        lo, hi = math.log10(xs[0]), math.log10(xs[-1])
        r = 1024.0
        while r > 1e-3 and math.floor(r * hi) - math.floor(r * lo) + 1 > buckets:
            r /= 2
        return ("log", r)
    s = 1
    while -(-n // s) > buckets:
        s *= 2
    return ("lin", s)


def bucket_edges(xs, plan: tuple) -> list[int]:
    """Index where each bucket of `plan` starts, and len(xs) at the end."""
    n = len(xs)
    kind, size = plan
    if kind == "lin":
        return list(range(0, n, size)) + [n]
    first = math.floor(size * math.log10(xs[0]))
    last = math.floor(size * math.log10(xs[-1]))
    return [0] + [bisect_left(xs, 10 ** (i / size)) for i in range(first + 1, last + 1)] + [n]


def _extremes(ys, a: int, b: int) -> tuple:
    """Indices of the min and max of ys[a:b], NaN left out; () when all are NaN."""
    seg = ys[a:b]
    if math.isnan(sum(seg)):        # rare (early members): drop NaN before min/max
        vals = [(v, i) for i, v in enumerate(seg) if v == v]
        if not vals:
            return ()
        return (a + min(vals)[1], a + max(vals)[1])
    return (a + seg.index(min(seg)), a + seg.index(max(seg)))


def downsample(xs, ys, width: int, log: bool = False, cache: dict | None = None) -> tuple[list, list]:
    """At most `width` points of (xs, ys) that keep the first and last number and each bucket's min and max.

    xs ascending. NaN values are left out. `cache` (a dict the caller keeps per series, emptied when
    the curve is cut back) keeps the extremes of complete buckets between calls.
    """
    n = len(ys)
    width = max(4, int(width))
    if n <= width:
        pts = [(x, y) for x, y in zip(xs, ys) if y == y]
        return [p[0] for p in pts], [p[1] for p in pts]
    plan = bucket_plan(xs, width, log)
    edges = bucket_edges(xs, plan)
    if cache is not None and cache.get("plan") != plan:
        cache.clear()
        cache["plan"] = plan
    done = cache.setdefault("done", {}) if cache is not None else None
    first, last = 0, n - 1
    while first < last and ys[first] != ys[first]:      # the curve starts at its first number
        first += 1
    while last > first and ys[last] != ys[last]:
        last -= 1
    keep = {first, last}
    kind, size = plan
    for j, (a, b) in enumerate(zip(edges, edges[1:])):
        if b <= a:
            continue
        key = (a, b)
        ext = done.get(key) if done is not None else None
        if ext is None:
            ext = _extremes(ys, a, b)
            complete = b < n or (kind == "lin" and b - a == size)
            if done is not None and complete:
                done[key] = ext
        keep.update(ext)
    idx = sorted(i for i in keep if ys[i] == ys[i])
    return [xs[i] for i in idx], [ys[i] for i in idx]
