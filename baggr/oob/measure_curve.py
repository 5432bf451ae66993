"""Every measure at log-spaced ensemble sizes, computed from the tallies while the run goes.

The sizes do not depend on the run's target size, so a run stopped, resumed or grown further
has its points at the same sizes as one trained to the end at once: every size up to
EVERY_UP_TO, then PER_DECADE sizes per factor of ten (at least 40 points up to any size from 40;
52 up to 100, 68 up to 300, 84 up to 1,000).
"""
from __future__ import annotations

import math
import time

import numpy as np

from baggr.errors import ModelFileError
from baggr.oob import measure_kernels as mk
from baggr.oob import measures as ms

SHARE_BINS = 1 << 16     # leaf-share votes: shares ranked in this many bins for the curve's AUC
EVERY_UP_TO = 40
PER_DECADE = 32


def sizes_up_to(m: int) -> list[int]:
    """The scheduled ensemble sizes 1 <= b <= m, ascending."""
    out = list(range(1, min(m, EVERY_UP_TO) + 1))
    j = 1
    while True:
        b = int(round(EVERY_UP_TO * 10 ** (j / PER_DECADE)))
        if b > m:
            return out
        if b > out[-1]:
            out.append(b)
        j += 1


def next_size(b: int) -> int:
    """The smallest scheduled size above b."""
    if b < EVERY_UP_TO:
        return b + 1
    j = max(1, int(math.floor(PER_DECADE * math.log10(b / EVERY_UP_TO))) - 1)
    while True:
        s = int(round(EVERY_UP_TO * 10 ** (j / PER_DECADE)))
        if s > b:
            return s
        j += 1


def follow_estimate(values: dict, task: str, error, interval) -> dict:
    """values with the error (classes) or the MSE and RMSE (regression) replaced by the run's own
    estimate of it (`oob.error`, `oob.interval` or a point of `oob.curve`): where the OOB view
    corrects the estimate, these measures follow the correction."""
    out = dict(values)
    error = float(error) if error is not None else float("nan")
    iv = None if interval is None or any(v is None or not math.isfinite(v) for v in interval) \
        else (float(interval[0]), float(interval[1]))
    if not math.isfinite(error):
        return out
    if task == "classes":
        out["error"] = (error, iv)
    else:
        out["mse"] = (error, iv)
        out["rmse"] = (math.sqrt(max(error, 0.0)),
                       None if iv is None else (math.sqrt(max(iv[0], 0.0)), math.sqrt(max(iv[1], 0.0))))
    return out


def curve_class_measures(y, votes) -> dict:
    """The class measures at a point of the curve. Leaf-share votes that are all whole numbers (every
    leaf pure, as in full trees) are counts like hard votes: counted per (k, v) cell, exactly, at the
    cost of hard votes, instead of per row with the shares binned for the AUC."""
    if votes.dtype != np.int32 and votes.shape[0] and mk.whole_votes(votes, float(np.iinfo(np.int32).max)):
        return ms.class_measures(y, votes.astype(np.int32))
    return ms.class_measures(y, votes, share_bins=SHARE_BINS)


class MeasureCurve:
    """The measures at the scheduled sizes of one run, filled in as members are folded."""

    def __init__(self, task: str):
        self.task = task
        self.names = ms.task_measures(task)
        self.sizes: list[int] = []
        self.rows: list[np.ndarray] = []       # per size: (measures, 3) value, lo, hi
        self.seconds = 0.0
        self._next = 1

    def after_fold(self, tally) -> dict | None:
        """The measures when tally.members is a scheduled size (then also stored), else None."""
        b = tally.members
        while self._next < b:       # sizes passed over (a checkpoint from before the measures)
            self._next = next_size(self._next)
        if b != self._next:
            return None
        self._next = next_size(b)
        t0 = time.perf_counter()
        values = self.compute(tally)
        row = np.full((len(self.names), 3), np.nan)
        for i, name in enumerate(self.names):
            v, iv = values.get(name, (float("nan"), None))
            row[i, 0] = v
            if iv is not None:
                row[i, 1:] = iv
        self.sizes.append(b)
        self.rows.append(row)
        self.seconds += time.perf_counter() - t0
        return values

    def compute(self, tally) -> dict:
        """Every measure of the tally as it stands."""
        b = tally.members
        if self.task == "classes":
            values = curve_class_measures(tally.y, tally.votes)
        else:
            values = ms.regression_measures(tally.y, tally.value_sum, tally.left_out)
        return follow_estimate(values, self.task, tally.curve[b - 1], tally.curve_interval[b - 1])

    # -- arrays for checkpoints and the model file -------------------------------------------------
    def arrays(self) -> dict:
        values = np.stack(self.rows) if self.rows else np.zeros((0, len(self.names), 3))
        return {"measure_sizes": np.asarray(self.sizes, np.int64), "measure_values": values,
                "measure_names": encode_names(self.names)}

    def restore(self, arrays: dict, members: int) -> None:
        """Take the points of a checkpoint (validated by check_arrays) up to `members`."""
        sizes = arrays.get("measure_sizes")
        self._next = next_size(members) if members else 1
        if sizes is None:   # a checkpoint from before the measures: the points go on from here
            self.sizes, self.rows = [], []
            return
        check_arrays(arrays, "checkpoint")
        values = _by_name(arrays, self.names)
        keep = sizes <= members
        self.sizes = [int(s) for s in sizes[keep]]
        self.rows = [values[i] for i in np.flatnonzero(keep)]


def encode_names(names) -> np.ndarray:
    """Names as uint8 bytes joined by commas (model files hold numbers only)."""
    return np.frombuffer(",".join(names).encode("ascii"), np.uint8).copy()


def decode_names(a) -> list[str]:
    try:
        return bytes(np.asarray(a, np.uint8)).decode("ascii").split(",")
    except (UnicodeDecodeError, ValueError, TypeError):
        return []


def _by_name(arrays: dict, names) -> np.ndarray:
    """measure_values with its columns in the order of `names` (NaN for a measure not stored)."""
    stored = decode_names(arrays["measure_names"])
    v = arrays["measure_values"]
    out = np.full((v.shape[0], len(names), 3), np.nan)
    for i, name in enumerate(names):
        if name in stored:
            out[:, i] = v[:, stored.index(name)]
    return out


def check_arrays(a: dict, where, n_rows: int | None = None) -> None:
    """ModelFileError unless the measure arrays and the targets (when present) are whole and consistent."""
    t = a.get("target")
    if t is not None and (t.ndim != 1 or t.dtype.kind not in "if" or (n_rows is not None and t.shape[0] != n_rows)):
        raise ModelFileError(f"{where}: the stored targets do not match the rows")
    keys = ("measure_sizes", "measure_values", "measure_names")
    have = [k in a for k in keys]
    if not any(have):
        return
    if not all(have):
        raise ModelFileError(f"{where}: the measure curve is incomplete")
    s, v, n = a["measure_sizes"], a["measure_values"], a["measure_names"]
    if s.dtype != np.int64 or s.ndim != 1 or v.dtype != np.float64 or v.ndim != 3 or v.shape[2] != 3 \
            or v.shape[0] != s.shape[0] or n.ndim != 1 or n.dtype != np.uint8 or v.shape[1] != len(decode_names(n)):
        raise ModelFileError(f"{where}: the measure curve has the wrong type or shape")
    if s.shape[0] and (s[0] < 1 or np.any(np.diff(s) <= 0)):
        raise ModelFileError(f"{where}: the measure curve's sizes are not ascending")


def curve_of(oob, raw: bool = False) -> tuple[list, dict]:
    """(sizes, {name: (P, 3) value, lo, hi}) of a run's OOB view at the measure curve's sizes; empty
    when it has none.

    Every measure with an estimate for the kept ensemble (baggr/oob/measure_fit.py; the error and the
    MSE from the view's own curve) is read off that estimate at those sizes, as it stands at the end
    (a point stored mid-run held the figures of its time). raw: the textbook OOB figures instead (the
    points stored as the run went, the error (MSE) from the view's raw curve)."""
    a = oob.arrays()
    if "measure_sizes" not in a:
        return [], {}
    names = ms.task_measures(oob.task)
    v = _by_name(a, names)
    sizes = [int(x) for x in a["measure_sizes"]]
    if raw:
        curve, band = np.asarray(oob.raw_curve), np.asarray(oob.raw_curve_interval)
    else:
        curve, band = np.asarray(oob.curve), np.asarray(oob.curve_interval)
    for j, b in enumerate(sizes):
        if b <= curve.shape[0]:
            now = follow_estimate({}, oob.task, curve[b - 1], band[b - 1])
            for name, (value, iv) in now.items():
                if raw and name == "rmse":
                    continue       # the stored textbook point
                i = names.index(name)
                v[j, i] = [value, *(iv if iv is not None else (np.nan, np.nan))]
    if not raw and oob.corrected:
        fits = oob.measure_fits()
        bs = np.array(sizes, np.int64)
        keep = bs <= oob.members
        for name, fit in fits.items():
            if name in ("error", "mse"):
                continue
            i = names.index(name)
            e, var = fit.at(bs[keep]), fit.var_at(bs[keep])
            for j, (x, w) in zip(np.flatnonzero(keep), zip(e.tolist(), var.tolist())):
                iv = fit.interval(x, w)
                v[j, i] = [x, *(iv if iv is not None else (np.nan, np.nan))]
    return sizes, {name: v[:, i] for i, name in enumerate(names)}
