"""The journal's line format: one JSON object per line, {"event": ..., "t": ..., fields...}, strict JSON
(NaN and infinities written as null). Pure Python.
"""
from __future__ import annotations

import json
import math

STATUSES = ("waiting", "running", "finished", "stopped", "failed", "crashed")
END_STATUSES = ("finished", "stopped", "failed")


def _clean(v):
    """A copy of v that strict JSON accepts: NaN and infinities become null, arrays become lists."""
    if isinstance(v, float):
        return v if math.isfinite(v) else None
    if isinstance(v, dict):
        return {k: _clean(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_clean(x) for x in v]
    if hasattr(v, "tolist"):          # numpy arrays and scalars, without importing numpy
        return _clean(v.tolist())
    return v


def _default(v):
    if hasattr(v, "tolist"):
        return v.tolist()
    raise TypeError(f"cannot write a {type(v).__name__} to the journal")


def dumps(event: str, fields: dict, t: float) -> str:
    """One journal line (without its newline)."""
    obj = {"event": event, "t": round(t, 3), **fields}
    try:
        return json.dumps(obj, separators=(",", ":"), allow_nan=False, default=_default)
    except ValueError:                # a NaN somewhere: the rare slow path
        return json.dumps(_clean(obj), separators=(",", ":"), allow_nan=False, default=_default)

def cluster_of(start: dict) -> dict | None:
    """A start line's cluster (None: members grown on local threads): {"option", "address", "workers", "threads"}."""
    if not start.get("cluster"):
        return None
    return {"option": str(start.get("cluster")), "address": start.get("cluster_address"),
            "workers": start.get("cluster_workers"), "threads": start.get("cluster_threads")}


def grown_on(cluster: dict | None, threads=None) -> str:
    """Where the members grow, in words: 'local threads (4)', 'Dask cluster tcp://10.0.0.5:8786 (3 workers,
    12 threads)', 'local Dask cluster tcp://127.0.0.1:40123 (2 workers, 2 threads)' for local:N."""
    if not cluster:
        return f"local threads ({threads})" if isinstance(threads, int) else "local threads"
    opt = cluster.get("option") or ""
    address = cluster.get("address") or opt or "?"
    head = ("local Dask cluster " if opt.startswith("local:") else "Dask cluster ") + str(address)
    w, t = cluster.get("workers"), cluster.get("threads")
    parts = [f"{w} worker" + ("" if w == 1 else "s")] if isinstance(w, int) else []
    if isinstance(t, int):
        parts.append(f"{t} thread" + ("" if t == 1 else "s"))
    return head + (f" ({', '.join(parts)})" if parts else "")


def grown_on_rows(cluster: dict) -> list[tuple[str, str]]:
    """The same in short rows for a narrow panel: ('grown on', 'Dask, 3 workers'), ('scheduler',
    'tcp://10.0.0.5:8786'), ('threads', '12 on the workers')."""
    w, t = cluster.get("workers"), cluster.get("threads")
    where = "local Dask" if str(cluster.get("option") or "").startswith("local:") else "Dask"
    if isinstance(w, int):
        where += f", {w} worker" + ("" if w == 1 else "s")
    rows = [("grown on", where), ("scheduler", str(cluster.get("address") or cluster.get("option") or "?"))]
    if isinstance(t, int):
        rows.append(("threads", f"{t} on the workers"))
    return rows
