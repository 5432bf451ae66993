"""The model file: one .npz (no pickles) with a JSON header; validated in full on load.

Version 3 stores the compact forest (compact.py: 8 bytes a node) in parts of consecutive members,
arrays tree0_*, tree1_*, ...: a run appends one part to its trees file at each checkpoint and the
OOB results and header at its end (runs/trees_file.py), so its model is written once, as it goes;
ensemble.save writes one part. Version 2 stored one compact forest (tree_*); version 1 the
learner's node arrays (forest.py: about 50 bytes a node). Both are still read.
"""
from __future__ import annotations

import os
import time

import numpy as np

from baggr.version import __version__
from baggr import data
from baggr.model import npzfile
from baggr.config import Config
from baggr.errors import BaggrError, ModelFileError
from baggr.model.compact import Compact, Stack, kind_for, parts_of
from baggr.model.forest import Forest
from baggr.oob.importance import check_arrays as _check_importance
from baggr.oob.measure_curve import check_arrays as _check_measures
from baggr.oob.view import OOB

FORMAT = "baggr-model"
FORMAT_VERSION = 3
MAX_PARTS = 1 << 20

# OOB arrays by task: name -> (dtype kinds allowed, ndim)
OOB_FIELDS = {
    "classes": {"members": (np.int64, 1), "left_out": (np.int32, 1), "votes": (None, 2), "pred": (np.int32, 1),
                "confusion": (np.int64, 2), "class_wrong": (np.int64, 1), "class_covered": (np.int64, 1),
                "totals": (np.int64, 1), "curve": (np.float64, 1), "class_curve": (np.float64, 2),
                "curve_interval": (np.float64, 2), "class_rows": (np.int64, 1)},
    "regression": {"members": (np.int64, 1), "left_out": (np.int32, 1), "value_sum": (np.float64, 1),
                   "sq_err": (np.float64, 1), "sums": (np.float64, 1), "curve": (np.float64, 1),
                   "curve_interval": (np.float64, 2)},
}


def part_arrays(part: Compact, p: int) -> dict:
    """The arrays of tree part p as the model file names them."""
    return {f"tree{p}_{k}": v for k, v in part.arrays.items()}


def trees_header(kind: str, n_out: int, parts: list[int]) -> dict:
    """The header's description of the trees: their kind, outputs and the members of each part."""
    return {"kind": kind, "n_out": int(n_out), "parts": [int(k) for k in parts]}


def rest(ensemble, trees: dict | None) -> tuple[dict, dict]:
    """(arrays, header) of everything but the trees: binning, OOB results, the header (whose
    "trees" is `trees`, None for an estimate-only ensemble)."""
    arrays = {"bin_" + k: v for k, v in ensemble.binning.to_arrays().items()}
    arrays.update({"oob_" + k: v for k, v in ensemble.oob.arrays().items()})
    header = {"format": FORMAT, "format_version": FORMAT_VERSION, "baggr_version": __version__,
              "created": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
              "schema": ensemble.schema.to_json(), "config": ensemble.config.to_dict(),
              "has_trees": trees is not None, "trees": trees, "oob": ensemble.oob.summary(),
              "stats": {k: (float(v) if isinstance(v, (float, np.floating)) else int(v)) for k, v in ensemble.stats.items()}}
    return arrays, header


def save(ensemble, path, *, compress: bool = False) -> None:  # ensemble: a baggr.model.ensemble.Ensemble
    """Write the ensemble to path (atomically: a crash never leaves a torn model file).
    compress: deflate the arrays (see bench/README.md for what it saves and costs on load)."""
    arrays, trees = {}, None
    compact = ensemble.compact
    if compact is not None:
        parts = [p for p in parts_of(compact) if p.members] or parts_of(compact)[:1]
        for i, part in enumerate(parts):
            arrays.update(part_arrays(part, i))
        trees = trees_header(compact.kind, compact.n_out, [p.members for p in parts])
    more, header = rest(ensemble, trees)
    arrays.update(more)
    try:
        npzfile.write_atomic(path, arrays, header, compress=compress)
    except OSError as e:
        raise BaggrError(f"cannot write the model file {os.fspath(path)}: {e.strerror or e}") from None


def read(path) -> tuple:
    """(schema, binning, config, forest, oob, stats) of a model file, validated in full; any damage
    gives a ModelFileError naming the problem (baggr.model.ensemble.load makes the Ensemble)."""
    header, arrays = npzfile.read(path, "model file")
    if header.get("format") != FORMAT:
        raise ModelFileError(f"{os.fspath(path)} is not a baggr model file")
    version = header.get("format_version")
    if not isinstance(version, int) or version < 1:
        raise ModelFileError(f"{os.fspath(path)}: format version {version!r} is not valid")
    if version > FORMAT_VERSION:
        raise ModelFileError(f"{os.fspath(path)} was written by a newer baggr (format {version}; "
                             f"this baggr {__version__} reads up to {FORMAT_VERSION}): upgrade baggr to read it")
    try:
        schema = data.Schema.from_json(header["schema"])
        config = Config.from_dict(header["config"])
    except BaggrError as e:
        raise ModelFileError(f"{os.fspath(path)}: {e}") from None
    except (KeyError, TypeError, ValueError) as e:
        raise ModelFileError(f"{os.fspath(path)}: the header is incomplete or damaged ({e})") from None
    binning = data.Binning.from_arrays({k[4:]: v for k, v in arrays.items() if k.startswith("bin_")})
    p = len(schema.names)
    if binning.n_bins.shape[0] != p:
        raise ModelFileError(f"{os.fspath(path)}: binning has {binning.n_bins.shape[0]} features, schema {p}")
    n_out = max(1, len(schema.classes)) if schema.task == "classes" else 1
    forest = None
    if header.get("has_trees"):
        if version < 3:
            tree_arrays = {k[5:]: v for k, v in arrays.items() if k.startswith("tree_")}
            forest = (_forest_v1 if version == 1 else _compact)(tree_arrays, header, schema, config, binning, n_out,
                                                                path)
        else:
            forest = _parts(arrays, header, schema, config, binning, n_out, path)
    oob_arrays = {k[4:]: v for k, v in arrays.items() if k.startswith("oob_")}
    _check_oob(oob_arrays, schema, path)
    stats = header.get("stats") if isinstance(header.get("stats"), dict) else {}
    return schema, binning, config, forest, OOB(schema.task, schema.classes, oob_arrays), stats


def _forest_v1(tree_arrays, header, schema, config, binning, n_out, path) -> Forest:
    forest = Forest(tree_arrays)
    try:
        forest.validate(len(schema.names), n_out)
    except ModelFileError as e:
        raise ModelFileError(f"{os.fspath(path)}: {e}") from None
    a = forest.arrays
    if np.any((a["is_cat"] == 1) != binning.is_cat[np.maximum(a["feature"], 0)].astype(bool) & (a["feature"] >= 0)):
        raise ModelFileError(f"{os.fspath(path)}: a split's kind does not match its feature's kind")
    return forest


def _parts(arrays, header, schema, config, binning, n_out, path) -> Compact | Stack:
    """The trees of a version-3 file: its parts, each checked; one Compact, or a Stack of several."""
    trees = header.get("trees")
    parts = trees.get("parts") if isinstance(trees, dict) else None
    if not isinstance(parts, list) or not 1 <= len(parts) <= MAX_PARTS \
            or any(isinstance(k, bool) or not isinstance(k, int) or k < 0 for k in parts):
        raise ModelFileError(f"{os.fspath(path)}: the header's list of tree parts is damaged")
    names = {f"tree{p}_" for p in range(len(parts))}
    stray = [k for k in arrays if k.startswith("tree") and k[:k.find("_") + 1] not in names]
    if stray:
        raise ModelFileError(f"{os.fspath(path)}: array {stray[0]!r} belongs to no tree part")
    out = []
    for p, k in enumerate(parts):
        prefix = f"tree{p}_"
        part = _compact({n[len(prefix):]: v for n, v in arrays.items() if n.startswith(prefix)}, header, schema,
                        config, binning, n_out, path)
        if part.members != k:
            raise ModelFileError(f"{os.fspath(path)}: tree part {p} holds {part.members} members, the header says {k}")
        out.append(part)
    return out[0] if len(out) == 1 else Stack(out)


def _compact(tree_arrays, header, schema, config, binning, n_out, path) -> Compact:
    trees = header.get("trees")
    kind = kind_for(schema.task, config.vote)
    if not isinstance(trees, dict) or trees.get("kind") != kind or trees.get("n_out") != n_out:
        raise ModelFileError(f"{os.fspath(path)}: the header's description of the trees is damaged "
                             f"(a {schema.task} model with {config.vote} votes keeps {kind}, {n_out} outputs)")
    compact = Compact(tree_arrays, kind, n_out)
    try:
        compact.validate(binning.is_cat, n_out)
    except ModelFileError as e:
        raise ModelFileError(f"{os.fspath(path)}: {e}") from None
    return compact


def _check_oob(a: dict, schema, path) -> None:
    fields = OOB_FIELDS.get(schema.task)
    if fields is None:
        raise ModelFileError(f"{os.fspath(path)}: unknown task {schema.task!r}")
    for name, (dtype, ndim) in fields.items():
        x = a.get(name)
        if x is None:
            raise ModelFileError(f"{os.fspath(path)} lacks the OOB array '{name}'")
        if x.ndim != ndim or (dtype is not None and x.dtype != np.dtype(dtype)):
            raise ModelFileError(f"{os.fspath(path)}: OOB array '{name}' has the wrong type or shape")
    n = a["left_out"].shape[0]
    _check_measures(a, os.fspath(path), n)
    _check_importance(a, os.fspath(path))
    m = int(a["members"][0]) if a["members"].shape[0] == 1 else -1
    if m < 0 or a["curve"].shape[0] != m or a["curve_interval"].shape != (m, 2):
        raise ModelFileError(f"{os.fspath(path)}: the OOB curve does not match the member count")
    if schema.task == "classes":
        c = len(schema.classes)
        if a["votes"].shape != (n, c) or a["votes"].dtype not in (np.int32, np.float64) or a["pred"].shape != (n,):
            raise ModelFileError(f"{os.fspath(path)}: the OOB votes do not match the rows and classes")
        if np.any((a["pred"] < -1) | (a["pred"] >= c)) or a["confusion"].shape != (c, c) or a["class_curve"].shape != (m, c):
            raise ModelFileError(f"{os.fspath(path)}: the OOB class figures are damaged")
        if a["totals"].shape != (2,) or a["class_wrong"].shape != (c,) or a["class_covered"].shape != (c,) \
                or a["class_rows"].shape != (c,):
            raise ModelFileError(f"{os.fspath(path)}: the OOB class counts are damaged")
    else:
        if a["value_sum"].shape != (n,) or a["sq_err"].shape != (n,) or a["sums"].shape != (5,):
            raise ModelFileError(f"{os.fspath(path)}: the OOB sums are damaged")
        m2 = a.get("value_m2")
        if m2 is not None and (m2.dtype != np.float64 or m2.shape != (n,)):
            raise ModelFileError(f"{os.fspath(path)}: the OOB spreads are damaged")
    _check_fit(a, schema, m, path)


def _check_fit(a: dict, schema, members: int, path) -> None:
    """The estimated curves: final_* (the ensemble's own; absent in files written before it
    existed) and est_* (the run's latest refit, at or before its member count), where present."""
    sha = a.get("data_sha256")
    if sha is not None and (sha.dtype != np.uint8 or sha.shape != (32,)):
        raise ModelFileError(f"{os.fspath(path)}: the data fingerprint is damaged")
    need = a.get("est_needed")
    if need is not None and (need.dtype != np.int64 or need.ndim != 2 or need.shape[1] != 2):
        raise ModelFileError(f"{os.fspath(path)}: the refit history is damaged")
    for prefix, latest in (("final_", False), ("est_", True)):
        names = {k[len(prefix):]: v for k, v in a.items() if k.startswith(prefix) and k != "est_needed"}
        if names:
            _check_one_fit(names, schema, members, latest, path)


def _check_one_fit(names: dict, schema, members: int, latest: bool, path) -> None:
    from baggr.oob.curve import Fit
    want = {"members": (np.int64, 1), "sizes": (np.int64, 1), "error": (np.float64, 1), "var": (np.float64, 1),
            "class_error": (np.float64, 2), "class_var": (np.float64, 2)}
    for name, (dtype, ndim) in want.items():
        x = names.get(name)
        if x is None or x.dtype != np.dtype(dtype) or x.ndim != ndim:
            raise ModelFileError(f"{os.fspath(path)}: the estimated curve's array '{name}' is missing or damaged")
    try:
        fit = Fit.from_arrays(schema.task, names)
    except ValueError as e:
        raise ModelFileError(f"{os.fspath(path)}: the estimated curve is damaged ({e})") from None
    bad = fit.check()
    c = len(schema.classes) if schema.task == "classes" else 0
    if bad is None and ((fit.members > members if latest else fit.members != members)
                        or fit.class_error.shape[1] != c):
        bad = "it belongs to another member count or class list"
    if bad:
        raise ModelFileError(f"{os.fspath(path)}: the estimated curve is damaged ({bad})")
