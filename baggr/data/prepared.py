"""A training table turned into what the kernels take: schema, binning, uint8 codes and targets."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from baggr.config import Config
from baggr.data.binning import Binning, encode, fit_binning
from baggr.data.schema import Schema, fit_schema_frame, missing_targets
from baggr.data.table import ArrayTable, read_table
from baggr.errors import ConfigError, DataError

MISSING_TARGET = ("drop", "refuse")


@dataclass
class Prepared:
    """Codes and targets of a training table, with the schema and binning that made them."""

    schema: Schema
    binning: Binning
    codes: np.ndarray      # uint8 (p, n), feature-major
    y_class: np.ndarray    # int32 (n,) or a dummy
    y_value: np.ndarray    # float64 (n,) or a dummy
    task: str
    missing_target: int = 0   # rows left out because their target is missing

    @property
    def n_rows(self) -> int:
        return self.codes.shape[1]

    @property
    def n_classes(self) -> int:
        return len(self.schema.classes)

    def for_workers(self) -> "Prepared":
        """What a remote worker needs to grow members: the codes, the targets, each feature's bin count
        and categorical flag. Column names, class labels, categorical levels and bin edges stay here
        (classes become 0..C-1, names empty): the members grown from it are the same."""
        p = self.codes.shape[0]
        schema = Schema(names=[""] * p, kinds=list(self.schema.kinds), levels=[None] * p, target=None,
                        task=self.task, classes=list(range(self.n_classes)))
        binning = Binning(edges=[None] * p, n_bins=self.binning.n_bins, is_cat=self.binning.is_cat)
        return Prepared(schema, binning, self.codes, self.y_class, self.y_value, self.task)


def prepare(X, y, config: Config, target: str | None = None, missing_target: str = "drop") -> Prepared:
    """Schema, binning and codes for a training table (the binning never looks at the target).

    missing_target: "drop" leaves out the rows whose target is missing (counted in
    Prepared.missing_target); "refuse" raises a DataError when there are any.
    """
    if missing_target not in MISSING_TARGET:
        raise ConfigError(f"missing_target must be 'drop' or 'refuse', got {missing_target!r}")
    try:
        n_target = len(y)
    except TypeError:
        raise DataError("the target must be a column of values (an array, list or Arrow array)") from None
    if n_target < 2:
        raise DataError(f"the table has {n_target} row(s); bagging needs at least 2")
    X = read_table(X)  # once: a path is read, a dict converted, a numpy array only wrapped
    dropped = 0
    if missing_target == "drop" and n_target == X.num_rows:
        X, y, dropped = drop_missing_targets(X, y)
        if X.num_rows < 2:
            raise DataError(f"only {X.num_rows} row(s) have a target ({dropped} are missing); bagging needs at least 2")
    schema, targets, X = fit_schema_frame(X, y, task=config.task, target=target)
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
    return Prepared(schema, binning, codes, y_class, y_value, schema.task, dropped)


def drop_missing_targets(X, y):
    """(X, y, count): the rows whose target is present, and how many were left out."""
    miss = missing_targets(y)
    k = int(np.count_nonzero(miss))
    if k == 0:
        return X, y, 0
    import pyarrow as pa
    keep = ~miss
    if isinstance(X, ArrayTable):
        X = ArrayTable(X.array[keep], X.columns)
    else:
        X = X.filter(pa.array(keep))
    if isinstance(y, (pa.Array, pa.ChunkedArray)):
        y = y.filter(pa.array(keep))
    elif isinstance(y, np.ndarray):
        y = y[keep]
    else:
        y = [v for v, kept in zip(y, keep) if kept]
    return X, y, k
