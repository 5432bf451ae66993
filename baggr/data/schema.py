"""Schema: what a training table holds (feature kinds, categorical levels, target classes)."""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from baggr.errors import ConfigError, DataError, ModelFileError
from baggr.data import dates as _dates
from baggr.data.table import (ArrayTable, as_float, as_frame, as_text, check_numeric_text, check_supported, column_kind,
                              shell_word)

KINDS = ("numeric", "categorical")
TASKS = ("classes", "regression")
OTHER = "(other)"   # the pooled level of a categorical feature with more than MAX_LEVELS levels
MAX_LEVELS = 255    # codes 0..254 hold levels, 255 is missing
MAX_CLASSES = 255
# A whole-number target with more distinct values than both of these is not taken as classes
# without being told (--task): more than MANY_VALUES values and more than MANY_SHARE of the rows.
MANY_VALUES = 20
MANY_SHARE = 0.05


@dataclass
class Schema:
    """Feature names, kinds and levels, and the target's name, task and classes, fixed at training.

    dates: the date columns of the table, [{"column": name, "parts": [...]}]; each became the
    numeric features "<column>.<part>" (baggr.data.dates).
    """

    names: list[str]
    kinds: list[str]
    levels: list[list[str] | None]
    target: str | None
    task: str
    classes: list
    dates: list = field(default_factory=list)

    @property
    def n_features(self) -> int:
        return len(self.names)

    def pooled(self, j: int) -> bool:
        """Whether categorical feature j pooled its rare levels into OTHER (which then takes unseen ones)."""
        lv = self.levels[j]
        return lv is not None and len(lv) == MAX_LEVELS and lv[-1] == OTHER

    def to_json(self) -> dict:
        d = {"names": list(self.names), "kinds": list(self.kinds),
             "levels": [None if lv is None else list(lv) for lv in self.levels],
             "target": self.target, "task": self.task, "classes": list(self.classes)}
        if self.dates:   # absent without dates: such files read as before
            d["dates"] = [{"column": x["column"], "parts": list(x["parts"])} for x in self.dates]
        return d

    @classmethod
    def from_json(cls, d) -> "Schema":
        """Rebuild from to_json's dict, validating everything (it comes from a file): ModelFileError if wrong."""
        def need(ok, what):
            if not ok:
                raise ModelFileError(f"bad schema in model file: {what}")

        need(isinstance(d, dict), "not an object")
        keys = {"names", "kinds", "levels", "target", "task", "classes"}
        need(keys <= set(d) <= keys | {"dates"}, f"keys {sorted(map(str, d))} instead of {sorted(keys)}")
        names, kinds, levels = d["names"], d["kinds"], d["levels"]
        need(isinstance(names, list) and names and all(isinstance(n, str) for n in names),
             "names must be a non-empty list of text")
        need(len(set(names)) == len(names), "duplicate feature names")
        need(isinstance(kinds, list) and len(kinds) == len(names) and all(k in KINDS for k in kinds),
             "kinds must list 'numeric' or 'categorical' for each feature")
        need(isinstance(levels, list) and len(levels) == len(names), "levels must have one entry per feature")
        for kind, lv in zip(kinds, levels):
            if kind == "numeric":
                need(lv is None, "a numeric feature has levels")
            else:
                need(isinstance(lv, list) and len(lv) <= MAX_LEVELS and all(isinstance(s, str) for s in lv)
                     and len(set(lv)) == len(lv), "categorical levels must be distinct text, at most 255")
        need(d["target"] is None or isinstance(d["target"], str), "target must be text or null")
        need(d["task"] in TASKS, f"task must be one of {TASKS}")
        classes = d["classes"]
        need(isinstance(classes, list), "classes must be a list")
        if d["task"] == "regression":
            need(classes == [], "a regression model has classes")
        else:
            need(2 <= len(classes) <= MAX_CLASSES, "a classes model needs 2 to 255 classes")
            types = {type(c) for c in classes}
            need(len(types) == 1 and types <= {str, int, bool, float}, "class labels must be all text, "
                 "all whole numbers, all numbers or all true/false")
            need(all(math.isfinite(c) for c in classes) if float in types else True, "a class label is not finite")
            need(all(a < b for a, b in zip(classes, classes[1:])), "class labels must be distinct and sorted")
        dates = d.get("dates", [])
        _dates.check_dates(dates, names, kinds, need)
        return cls(list(names), list(kinds), [None if lv is None else list(lv) for lv in levels],
                   d["target"], d["task"], list(classes),
                   [{"column": x["column"], "parts": list(x["parts"])} for x in dates])


def fit_schema(X, y, task: str | None = None, target: str | None = None) -> tuple[Schema, np.ndarray]:
    """Infer kinds, levels and classes from the training table; return (schema, targets).

    targets: int32 class index per row for task "classes" (classes sorted: numbers numerically, text by
    code point, False < True), float64 for "regression". task None: text, whole numbers and bools are
    classes, floats regression; a whole-number target with more than MANY_VALUES distinct values, and
    more than MANY_SHARE of the rows, is refused (the task must be given). target: the target's name, recorded in the schema. Date columns
    become numeric features (baggr.data.dates), recorded in the schema's dates.
    """
    schema, targets, _ = fit_schema_frame(X, y, task, target)
    return schema, targets


def fit_schema_frame(X, y, task: str | None = None, target: str | None = None):
    """fit_schema, and the table with its date columns expanded (what binning and encoding take)."""
    frame = as_frame(X)
    n = frame.num_rows
    found = [] if isinstance(frame, ArrayTable) else _dates.find_dates(frame)
    frame = _dates.expand(frame, found)
    names = list(frame.column_names)
    if not names:
        raise DataError("the table has no feature columns")
    if target is not None and target in names:
        raise DataError(f"column {target!r} is both a feature and the target")
    kinds, levels = [], []
    for i, name in enumerate(names):
        kind = "numeric" if isinstance(frame, ArrayTable) else check_supported(name, frame.column(i))
        if kind == "text":
            col = frame.column(i)
            check_numeric_text(name, col)
            kinds.append("categorical")
            levels.append(fit_levels(name, col))
        else:
            kinds.append("numeric")
            levels.append(None)
    task, classes, targets = fit_target(y, n, task, target or "target")
    return Schema(names, kinds, levels, target, task, classes, found), targets, frame


def fit_levels(name: str, col) -> list[str]:
    """Levels of a text column in code order: sorted; past 255, the 254 most frequent plus OTHER."""
    col = as_text(col)
    counts = pc.value_counts(col)
    t = pa.table({"v": counts.field("values"), "c": counts.field("counts")}).filter(pc.is_valid(counts.field("values")))
    if t.num_rows <= MAX_LEVELS:
        return sorted(t.column("v").to_pylist())
    present = len(col) - col.null_count
    if t.num_rows > 0.5 * present:
        raise DataError(f"column {name!r} looks like an identifier ({t.num_rows} distinct values in {present} "
                        f"rows); leave it out with --drop {shell_word(name)}, or it would only memorize rows")
    # Most frequent first, ties by text order, so the kept levels do not depend on row order.
    t = t.filter(pc.not_equal(t.column("v"), OTHER)).sort_by([("c", "descending"), ("v", "ascending")])
    return sorted(t.column("v").slice(0, MAX_LEVELS - 1).to_pylist()) + [OTHER]


def fit_target(y, n: int, task: str | None, name: str = "target") -> tuple[str, list, np.ndarray]:
    """(task, classes, targets) for a target column of n rows; DataError names what is wrong with it."""
    y = _target_array(y, name)
    if len(y) != n:
        raise DataError(f"target {name!r} has {len(y)} values but the table has {n} rows")
    if pa.types.is_dictionary(y.type):
        y = y.cast(y.type.value_type)
    kind = column_kind(y)
    if kind == "unsupported":
        raise DataError(f"target {name!r} has type {y.type}, which baggr cannot use")
    is_float = pa.types.is_floating(y.type) or pa.types.is_decimal(y.type)
    missing = int(np.count_nonzero(missing_targets(y)))
    if missing:
        raise DataError(f"target {name!r} has {missing} missing values (of {n}); fill them in, or leave those "
                        "rows out (--missing-target drop)")
    if task is None:
        task = "regression" if is_float else "classes"
        if pa.types.is_integer(y.type):
            _check_many_values(y, n, name)
    if task not in TASKS:
        raise ConfigError(f"task must be one of {', '.join(TASKS)}, got {task!r}")
    if task == "regression":
        if kind == "text":
            raise DataError(f"target {name!r} holds text; regression needs numbers (or give --task classes)")
        v = as_float(y)
        _check_finite(v, name)
        return task, [], np.ascontiguousarray(v, dtype=np.float64)
    if kind == "text":
        col = as_text(y)
        classes = sorted(pc.unique(col).to_pylist())
        _check_classes(classes, name)
        idx = pc.index_in(col, value_set=pa.array(classes, pa.string())).to_numpy()
        return task, classes, np.ascontiguousarray(idx, dtype=np.int32)
    if pa.types.is_boolean(y.type) or pa.types.is_integer(y.type):
        v = y.to_numpy()
        cast = bool if pa.types.is_boolean(y.type) else int
    else:
        v = as_float(y)
        _check_finite(v, name)
        cast = float
    u = np.unique(v)
    _check_classes(u, name)
    return task, [cast(c) for c in u], np.searchsorted(u, v).astype(np.int32)


def missing_targets(y) -> np.ndarray:
    """bool per row: the target is missing (null, or NaN in a float column)."""
    y = _target_array(y, "target")
    if pa.types.is_dictionary(y.type):
        y = y.cast(y.type.value_type)
    miss = pc.is_null(y, nan_is_null=pa.types.is_floating(y.type))
    return miss.to_numpy(zero_copy_only=False).astype(bool, copy=False) if len(y) else np.zeros(0, bool)


def _check_many_values(y, n: int, name: str) -> None:
    """Refuse to guess classes for a whole-number target with many distinct values (see MANY_VALUES)."""
    distinct = len(pc.unique(y))
    if distinct > MANY_VALUES and distinct > MANY_SHARE * n:
        raise DataError(f"target {name!r} holds {distinct} distinct whole numbers in {n} rows: give --task "
                        "regression to predict the number, or --task classes to treat each value as a class")


def _target_array(y, name: str) -> pa.ChunkedArray:
    if isinstance(y, pa.ChunkedArray):
        return y
    if isinstance(y, pa.Array):
        return pa.chunked_array([y])
    if isinstance(y, np.ndarray) and y.ndim != 1:
        raise DataError(f"target {name!r} must be 1-D, got shape {y.shape}")
    try:
        return pa.chunked_array([pa.array(y)])
    except (pa.ArrowException, TypeError, ValueError) as e:
        raise DataError(f"target {name!r} cannot be read: {str(e).splitlines()[0] if str(e) else e!r}") from None


def _check_finite(v: np.ndarray, name: str) -> None:
    bad = np.count_nonzero(~np.isfinite(v))
    if bad:
        raise DataError(f"target {name!r} holds {bad} infinite values")


def _check_classes(classes, name: str) -> None:
    if len(classes) < 2:
        first = [c.item() if isinstance(c, np.generic) else c for c in classes[:1]]
        only = f" ({first[0]!r})" if first else ""
        raise DataError(f"target {name!r} has only one class{only}; at least two are needed")
    if len(classes) > MAX_CLASSES:
        raise DataError(f"target {name!r} has {len(classes)} distinct values, more than {MAX_CLASSES} classes; "
                        "for a numeric target give --task regression")
