"""A training table turned into what the kernels take: schema, binning, uint8 codes and targets."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from baggr.config import Config
from baggr.data.binning import Binning, encode, fit_binning
from baggr.data.schema import Schema, fit_schema
from baggr.data.table import read_table
from baggr.errors import DataError


@dataclass
class Prepared:
    """Codes and targets of a training table, with the schema and binning that made them."""

    schema: Schema
    binning: Binning
    codes: np.ndarray      # uint8 (p, n), feature-major
    y_class: np.ndarray    # int32 (n,) or a dummy
    y_value: np.ndarray    # float64 (n,) or a dummy
    task: str

    @property
    def n_rows(self) -> int:
        return self.codes.shape[1]

    @property
    def n_classes(self) -> int:
        return len(self.schema.classes)


def prepare(X, y, config: Config, target: str | None = None) -> Prepared:
    """Schema, binning and codes for a training table (the binning never looks at the target)."""
    try:
        n_target = len(y)
    except TypeError:
        raise DataError("the target must be a column of values (an array, list or Arrow array)") from None
    if n_target < 2:
        raise DataError(f"the table has {n_target} row(s); bagging needs at least 2")
    X = read_table(X)  # once: a path is read, a dict converted, a numpy array only wrapped
    schema, targets = fit_schema(X, y, task=config.task, target=target)
    binning = fit_binning(X, schema, bins=config.bins)
    codes = encode(X, schema, binning)
    n = codes.shape[1]
    if n < 2:
        raise DataError(f"the table has {n} row(s); bagging needs at least 2")
    if codes.shape[0] == 0:
        raise DataError("the table has no feature columns besides the target")
    if schema.task == "classes":
        y_class, y_value = np.ascontiguousarray(targets, dtype=np.int32), np.zeros(1)
    else:
        y_class, y_value = np.zeros(1, np.int32), np.ascontiguousarray(targets, dtype=np.float64)
    return Prepared(schema, binning, codes, y_class, y_value, schema.task)
