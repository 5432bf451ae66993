"""Schema: what a training table holds (feature kinds, categorical levels, target classes)."""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from baggr.errors import ConfigError, DataError, ModelFileError
from baggr.data.table import ArrayTable, as_float, as_frame, as_text, check_numeric_text, check_supported, column_kind

KINDS = ("numeric", "categorical")
TASKS = ("classes", "regression")
OTHER = "(other)"   # the pooled level of a categorical feature with more than MAX_LEVELS levels
MAX_LEVELS = 255    # codes 0..254 hold levels, 255 is missing
MAX_CLASSES = 255


@dataclass
class Schema:
    """Feature names, kinds and levels, and the target's name, task and classes, fixed at training."""

    names: list[str]
    kinds: list[str]
    levels: list[list[str] | None]
    target: str | None
    task: str
    classes: list

    @property
    def n_features(self) -> int:
        return len(self.names)

    def pooled(self, j: int) -> bool:
        """Whether categorical feature j pooled its rare levels into OTHER (which then takes unseen ones)."""
        lv = self.levels[j]
        return lv is not None and len(lv) == MAX_LEVELS and lv[-1] == OTHER

    def to_json(self) -> dict:
        return {"names": list(self.names), "kinds": list(self.kinds),
                "levels": [None if lv is None else list(lv) for lv in self.levels],
                "target": self.target, "task": self.task, "classes": list(self.classes)}

    @classmethod
    def from_json(cls, d) -> "Schema":
        """Rebuild from to_json's dict, validating everything (it comes from a file): ModelFileError if wrong."""
        def need(ok, what):
            if not ok:
                raise ModelFileError(f"bad schema in model file: {what}")

        need(isinstance(d, dict), "not an object")
        keys = {"names", "kinds", "levels", "target", "task", "classes"}
        need(set(d) == keys, f"keys {sorted(map(str, d))} instead of {sorted(keys)}")
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
        return cls(list(names), list(kinds), [None if lv is None else list(lv) for lv in levels],
                   d["target"], d["task"], list(classes))


def fit_schema(X, y, task: str | None = None, target: str | None = None) -> tuple[Schema, np.ndarray]:
    """Infer kinds, levels and classes from the training table; return (schema, targets).

    targets: int32 class index per row for task "classes" (classes sorted: numbers numerically, text by
    code point, False < True), float64 for "regression". task None: text, whole numbers and bools are
    classes, floats regression. target: the target's name, recorded in the schema.
    """
    frame = as_frame(X)
    n = frame.num_rows
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
    return Schema(names, kinds, levels, target, task, classes), targets


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
                        "rows); drop it, or it would only memorize rows")
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
    missing = y.null_count
    if pa.types.is_floating(y.type):
        missing += pc.sum(pc.is_nan(y)).as_py() or 0
    if missing:
        raise DataError(f"target {name!r} has {missing} missing values (of {n}); drop those rows or fill them in")
    if task is None:
        task = "regression" if is_float else "classes"
    if task not in TASKS:
        raise ConfigError(f"task must be one of {', '.join(TASKS)}, got {task!r}")
    if task == "regression":
        if kind == "text":
            raise DataError(f"target {name!r} holds text; regression needs numbers (or use task 'classes')")
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
                        "for a numeric target use task 'regression'")
