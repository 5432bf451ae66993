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
