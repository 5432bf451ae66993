"""Tables in: reading (table), column kinds and levels (schema), dates as features (dates), bins and
uint8 codes (binning).

The names below load on first use, so `baggr.data.table` (no numba) can be read on its own.
"""
_HOME = {
    "MISSING": "binning", "Binning": "binning", "encode": "binning", "fit_binning": "binning",
    "numeric_edges": "binning", "unseen_levels": "binning", "OTHER": "schema", "Schema": "schema", "fit_schema": "schema",
    "ArrayTable": "table", "read_table": "table",
}


def __getattr__(name):
    if name in _HOME:
        import importlib
        return getattr(importlib.import_module(f"baggr.data.{_HOME[name]}"), name)
    raise AttributeError(f"module 'baggr.data' has no attribute {name!r}")


__all__ = sorted(_HOME)
