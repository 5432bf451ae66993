"""Tables in: reading (table), schema and levels (schema), bins and uint8 codes (binning), in one place."""
from .binning import MISSING, Binning, encode, fit_binning, numeric_edges
from .schema import OTHER, Schema, fit_schema
from .table import ArrayTable, read_table

__all__ = ["ArrayTable", "Binning", "MISSING", "OTHER", "Schema", "encode", "fit_binning", "fit_schema",
           "numeric_edges", "read_table"]
