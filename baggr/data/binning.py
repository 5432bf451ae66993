"""Binning: value thresholds per feature, and encoding tables into uint8 codes (255 = missing)."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from baggr.data import dates
from baggr.data.binning_kernels import bin_numeric
from baggr.errors import ConfigError, DataError, ModelFileError
from baggr.data.schema import MAX_LEVELS, OTHER, Schema
from baggr.data.table import ArrayTable, as_float, as_frame, as_text, check_numeric_text, check_supported

MISSING = 255
SAMPLE = 200_000     # most values per feature that quantiles look at
SAMPLE_SEED = 20_011  # fixed, so binning the same table twice gives the same edges
SLOTS = 255         # edge slots per feature in the kernel: at most 254 edges, then NaN padding
_ZERO = np.zeros(1, dtype=np.int64)


@dataclass
class Binning:
    """Per-feature bins: numeric thresholds (None for categorical), bin counts, categorical flags."""

    edges: list[np.ndarray | None]
    n_bins: np.ndarray   # int32 [p]: value codes 0..n_bins-1; MISSING (255) is always missing
    is_cat: np.ndarray   # uint8 [p]

    def to_arrays(self) -> dict[str, np.ndarray]:
        """Plain numeric arrays for an .npz: edges concatenated, with offsets[j]..offsets[j+1] for feature j."""
        parts = [np.empty(0) if e is None else e for e in self.edges]
        offsets = np.zeros(len(parts) + 1, dtype=np.int64)
        offsets[1:] = np.cumsum([len(e) for e in parts])
        return {"binning_edges": np.concatenate(parts).astype(np.float64) if parts else np.empty(0),
                "binning_offsets": offsets,
                "binning_n_bins": np.asarray(self.n_bins, dtype=np.int32),
                "binning_is_cat": np.asarray(self.is_cat, dtype=np.uint8)}

    @classmethod
    def from_arrays(cls, d) -> "Binning":
        """Rebuild from to_arrays' dict (other keys are ignored), validating shapes and values: ModelFileError."""
        def need(ok, what):
            if not ok:
                raise ModelFileError(f"bad binning in model file: {what}")

        want = {"binning_edges": np.float64, "binning_offsets": np.int64,
                "binning_n_bins": np.int32, "binning_is_cat": np.uint8}
        for key, dtype in want.items():
            need(key in d, f"{key} is missing")
            a = d[key]
            need(isinstance(a, np.ndarray) and a.ndim == 1 and a.dtype == dtype, f"{key} must be 1-D {np.dtype(dtype)}")
        edges, offsets, n_bins, is_cat = (d[k] for k in want)
        p = len(n_bins)
        need(p >= 1 and len(is_cat) == p and len(offsets) == p + 1, "array lengths do not agree")
        need(offsets[0] == 0 and offsets[-1] == len(edges) and np.all(np.diff(offsets) >= 0), "bad offsets")
        need(np.all((is_cat == 0) | (is_cat == 1)), "is_cat must be 0 or 1")
        need(np.all((n_bins >= 1) & (n_bins <= MAX_LEVELS)), "n_bins must be between 1 and 255")
        need(np.all(np.isfinite(edges)), "edges must be finite")
        out = []
        for j in range(p):
            e = edges[offsets[j]:offsets[j + 1]]
            if is_cat[j]:
                need(len(e) == 0, f"categorical feature {j} has edges")
                out.append(None)
            else:
                need(n_bins[j] == len(e) + 1, f"feature {j} has {len(e)} edges but {n_bins[j]} bins")
                need(np.all(np.diff(e) > 0), f"edges of feature {j} are not increasing")
                out.append(e.copy())
        return cls(out, n_bins.copy(), is_cat.copy())

    def check(self, schema: Schema) -> None:
        """Raise ModelFileError unless this binning belongs to the schema."""
        p = schema.n_features
        ok = len(self.edges) == p and len(self.n_bins) == p and len(self.is_cat) == p
        for j in range(p if ok else 0):
            if schema.kinds[j] == "categorical":
                ok &= bool(self.is_cat[j]) and self.n_bins[j] == max(1, len(schema.levels[j]))
            else:
                ok &= not self.is_cat[j] and self.edges[j] is not None
        if not ok:
            raise ModelFileError("binning and schema in the model file do not match")


def fit_binning(X, schema: Schema, bins: int = 255) -> Binning:
    """Bins per feature from the feature values alone (never the target, so nothing leaks into OOB rows).

    Numeric: with at most `bins` distinct finite values, one bin per value (edges at midpoints);
    otherwise edges at the 1/bins, ..., (bins-1)/bins quantiles of a fixed subsample of at most
    SAMPLE values. No finite values, or one: a single bin. Categorical: one bin per level.
    """
    if isinstance(bins, bool) or not isinstance(bins, (int, np.integer)) or not 2 <= bins <= 255:
        raise ConfigError(f"bins must be between 2 and 255, got {bins!r}")
    frame = dates.expand(as_frame(X), schema.dates)
    cols = match_columns(frame, schema)
    n = frame.num_rows
    sample = None if n <= SAMPLE else np.sort(np.random.default_rng(SAMPLE_SEED).choice(n, SAMPLE, replace=False))
    p = schema.n_features
    edges, n_bins, is_cat = [], np.zeros(p, np.int32), np.zeros(p, np.uint8)
    for j in range(p):
        if schema.kinds[j] == "categorical":
            edges.append(None)
            n_bins[j], is_cat[j] = max(1, len(schema.levels[j])), 1
            continue
        if isinstance(frame, ArrayTable):
            values = frame.values(cols[j])
        else:
            values = numeric_column(frame, cols[j], schema.names[j])
        e = numeric_edges(values, int(bins), sample)
        edges.append(e)
        n_bins[j] = len(e) + 1
    return Binning(edges, n_bins, is_cat)


def numeric_edges(values: np.ndarray, bins: int, sample: np.ndarray | None = None) -> np.ndarray:
    """Thresholds of one numeric feature from its finite values; code = searchsorted(edges, x, 'right')."""
    s = _finite_sorted(values if sample is None else values[sample])
    u = _distinct(s)
    if sample is not None and len(u) <= bins:
        # A rare value may be absent from the sample: few distinct values are counted on the full column.
        s = _finite_sorted(values)
        u = _distinct(s)
    if len(u) <= bins:
        return _midpoints(u)
    e = np.unique(np.quantile(s, np.arange(1, bins) / bins))
    return e[e > s[0]]  # an edge at the minimum would leave bin 0 empty


def _finite_sorted(v) -> np.ndarray:
    v = np.asarray(v, dtype=np.float64)
    w = v[np.isfinite(v)]  # a copy, so sorting in place leaves the caller's array alone
    w.sort()
    return w


def _distinct(s: np.ndarray) -> np.ndarray:
    if len(s) == 0:
        return s
    return s[np.concatenate(([True], s[1:] != s[:-1]))]


def _midpoints(u: np.ndarray) -> np.ndarray:
    """Thresholds between consecutive distinct values, each strictly above the lower one."""
    lo, hi = u[:-1], u[1:]
    mid = lo / 2 + hi / 2  # halves first: no overflow near the largest floats
    # Between adjacent floats the midpoint may round down onto lo, which would put lo in hi's bin.
    return np.where((mid > lo) & (mid <= hi), mid, hi)


def encode(X, schema: Schema, binning: Binning) -> np.ndarray:
    """uint8 codes (p, n), C-contiguous, one row per feature; missing (NaN/null) is 255.

    Works for training and for new data: columns are matched by name (numpy input by position and must
    have exactly p columns); extra columns are ignored; a column of the wrong kind is a DataError.
    A categorical level not seen in training is missing (255), except where the feature pooled rare
    levels into "(other)": then it joins "(other)" (unseen_levels counts them). +inf falls in the top
    bin, -inf in bin 0. Date columns are turned into their numeric parts as in training.
    """
    binning.check(schema)
    frame = dates.expand(as_frame(X), schema.dates)
    cols = match_columns(frame, schema)
    p, n = schema.n_features, frame.num_rows
    out = np.empty((p, n), dtype=np.uint8)
    if isinstance(frame, ArrayTable):
        _array_codes(frame, cols, padded_edges(binning.edges), out)
        return out
    for j, name in enumerate(schema.names):
        col = frame.column(cols[j])
        kind = check_supported(name, col, hint=False)
        if kind == "null":
            out[j] = MISSING
        elif schema.kinds[j] == "categorical":
            if kind != "text":
                raise DataError(f"column {name!r} should be categorical (text) but holds {kind} values")
            _level_codes(col, schema.levels[j], schema.pooled(j), out[j])
        else:
            v = numeric_column(frame, cols[j], name)
            v = v if v.flags.writeable else v.copy()  # one array type for the kernel: one compile
            bin_numeric(v.reshape(-1, 1), _ZERO, padded_edges([binning.edges[j]]), out[j:j + 1], _ZERO)
    return out


def padded_edges(edges: list) -> np.ndarray:
    """float64 (q, 255): each feature's edges, padded with NaN (never counted) for the branch-free search."""
    ep = np.full((len(edges), SLOTS), np.nan)
    for k, e in enumerate(edges):
        ep[k, :len(e)] = e
    return ep


def _array_codes(frame: ArrayTable, cols: list[int], ep: np.ndarray, out: np.ndarray) -> None:
    a = frame.array
    src = np.array([frame.columns[c] for c in cols], dtype=np.int64)
    rows = np.arange(len(cols), dtype=np.int64)
    if a.dtype == np.float64 and a.flags.c_contiguous and a.flags.writeable and a.flags.aligned:
        bin_numeric(a, src, ep, out, rows)  # the input as it is: no copy at all
        return
    # Other dtypes and layouts: small float64 blocks (about 4 MiB) keep the one compiled kernel type.
    block = max(1024, (1 << 19) // max(1, len(cols)))
    for r0 in range(0, frame.num_rows, block):
        part = np.ascontiguousarray(a[r0:r0 + block][:, src], dtype=np.float64)
        tmp = np.empty((len(cols), part.shape[0]), dtype=np.uint8)
        bin_numeric(part, rows, ep, tmp, rows)
        out[:, r0:r0 + block] = tmp


def match_columns(frame, schema: Schema) -> list[int]:
    """Index in the frame of each schema feature; DataError for missing columns or a numpy shape mismatch."""
    p = schema.n_features
    if isinstance(frame, ArrayTable):
        if frame.num_columns != p:
            raise DataError(f"the numpy table has {frame.num_columns} columns but the model has {p} features")
        cat = [n for n, k in zip(schema.names, schema.kinds) if k == "categorical"]
        if cat:
            raise DataError(f"column {cat[0]!r} should be categorical (text) but a numpy table holds numbers; "
                            "give a dict or an Arrow table")
        return list(range(p))
    index = {name: i for i, name in enumerate(frame.column_names)}
    missing = [name for name in schema.names if name not in index]
    if missing:
        # a date column is named once, not by the parts it would have become
        made = {f: d["column"] for d in schema.dates for f in dates.feature_names(d["column"], d["parts"])}
        missing = list(dict.fromkeys(made.get(m, m) for m in missing))
        shown = ", ".join(repr(m) for m in missing[:8]) + (", ..." if len(missing) > 8 else "")
        raise DataError(f"the table lacks {len(missing)} of the model's columns: {shown}")
    return [index[name] for name in schema.names]


def numeric_column(frame: pa.Table, i: int, name: str) -> np.ndarray:
    """Column i of an Arrow table as float64 (NaN missing); DataError if it is not numeric."""
    col = frame.column(i)
    kind = check_supported(name, col, hint=False)
    if kind == "text":
        check_numeric_text(name, col)
        raise DataError(f"column {name!r} should be numeric but holds text")
    return as_float(col)


def unseen_levels(X, schema: Schema) -> dict[str, tuple[int, bool]]:
    """Per categorical feature with levels the model never saw: (how many such values, pooled).

    pooled: the feature put them into "(other)"; otherwise they were scored as missing (see encode).
    """
    frame = as_frame(X)
    if isinstance(frame, ArrayTable):
        return {}
    index = {name: i for i, name in enumerate(frame.column_names)}
    out = {}
    for j, name in enumerate(schema.names):
        if schema.kinds[j] != "categorical" or name not in index:
            continue
        col = frame.column(index[name])
        if check_supported(name, col, hint=False) != "text":
            continue
        col = as_text(col)
        levels = pa.array(schema.levels[j], pa.string())
        unseen = pc.and_(pc.is_valid(col), pc.invert(pc.is_in(col, value_set=levels)))
        k = pc.sum(unseen).as_py() or 0
        if k:
            out[name] = (int(k), schema.pooled(j))
    return out


def _level_codes(col, levels: list[str], pooled: bool, out: np.ndarray) -> None:
    """Write codes of a categorical feature: level index; null -> MISSING; unseen -> MISSING or OTHER."""
    col = as_text(col)
    if not levels:
        out[:] = MISSING
        return
    idx = pc.fill_null(pc.index_in(col, value_set=pa.array(levels, pa.string())), -1).to_numpy()
    unseen = MISSING
    if pooled:
        unseen = np.where(pc.is_valid(col).to_numpy(zero_copy_only=False), levels.index(OTHER), MISSING)
    out[:] = np.where(idx >= 0, idx, unseen)
