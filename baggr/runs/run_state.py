"""The state of a run as its journal tells it: a summary and the whole per-member curve, folded
event by event. Pure Python.
"""
from __future__ import annotations

import math
from array import array
from bisect import bisect_left
from collections import deque
from pathlib import Path

from baggr.oob.intervals import wilson
from baggr.runs.downsample import downsample
from baggr.runs.files import JOURNAL
from baggr.runs.journal_lines import END_STATUSES, cluster_of
from baggr.runs.journal_reader import JournalReader
from baggr.runs.measure_points import MeasurePoints


def class_interval(error: float | None, n: int) -> tuple[float, float] | None:
    """Wilson 95% interval of a class's OOB error rate over its n OOB-covered rows (Wilson 1927)."""
    if error is None or n <= 0:
        return None
    return wilson(round(error * n), n)


NAN = math.nan


def _opt(v):
    return None if v is None else float(v)


class RunState:
    """What the journal says so far: a summary and the whole per-member curve in compact arrays.

    The latest figures (error, interval, class_error, coverage, confusion, r2, rate) are read from
    the last member line when asked for, so folding a long journal costs only the curve appends.
    """

    def __init__(self):
        self.reset()

    def reset(self) -> None:
        """Forget everything (the journal was replaced)."""
        self.task = None
        self.classes: list[str] = []
        self.class_rows: list[int] = []
        self.rows = None
        self.features = None
        self.members_target = None
        self.members = 0
        self.first_member = 0
        self.starts = 0
        self.resumed = False
        self.elapsed = 0.0
        self.pid = None
        self.pid_started = None
        self.host = None
        self.threads = None
        self.cluster = None        # where the latest start grows members: None (local threads) or cluster_of()
        self.config = None
        self.resolved = None       # the settings the data chose (the start line's "resolved")
        self.version = None
        self.status = "waiting"
        self.reason = None
        self.started_t = None      # t of the first start line
        self.last_t = None         # t of the latest line
        self.last_checkpoint = None
        self.warnings: deque = deque(maxlen=20)
        self.events = 0
        self.unreadable = 0        # events whose fields did not make sense
        self._last = None          # the latest member line (a dict), or figures restored from the curve
        # The curve: member numbers (ascending) and one value per member. float32 where only drawn.
        self.curve_member = array("i")
        self.curve_error = array("d")
        self.curve_lo = array("f")
        self.curve_hi = array("f")
        self.curve_r2 = array("f")
        self.curve_raw = array("f")   # the textbook OOB error after each member
        self.curve_class: list[array] = []
        # the run's latest estimated curve over ensemble sizes, from its latest refit line:
        # {"member": m, "b": [...], "error": [...], "lo": [...], "hi": [...], "class_error": [[...], ...]}
        self.fit: dict | None = None
        # the chosen --measure's estimate from the latest refit line (or the end line), when the run is
        # judged by a measure other than the error (MSE): {name, value, interval, limit, limit_interval,
        # members_needed, curve: {b, error (the measure's values), lo, hi}, member}
        self.measure_estimate: dict | None = None
        self._drawn: dict = {}     # per series: extremes of complete buckets (see downsample)
        self.measures = MeasurePoints()   # the measures at the sizes the job computed them, and importance
        self.feature_names: list[str] = []

    # -- folding

    def fold(self, ev: dict) -> None:
        """Take one event into the state."""
        self.events += 1
        try:
            kind = ev["event"]
            if kind == "member":
                self._member(ev)
            elif kind == "start":
                self._start(ev)
            elif kind == "end":
                self._end(ev)
            elif kind == "checkpoint":
                self.last_checkpoint = int(ev["member"])
            elif kind == "warning":
                self.warnings.append(str(ev.get("message", "")))
            t = ev.get("t")
            if t is not None:
                self.last_t = float(t)
        except (KeyError, TypeError, ValueError, IndexError, OverflowError):
            self.unreadable += 1

    def fold_all(self, events) -> None:
        for ev in events:
            self.fold(ev)

    def _start(self, ev: dict) -> None:
        classes = [str(c) for c in ev.get("classes") or []]
        class_rows = [int(r) for r in ev.get("class_rows") or []]
        first = int(ev.get("first_member") or 0)
        self.starts += 1
        self.task = ev.get("task", self.task)
        self.classes, self.class_rows = classes, class_rows
        self.rows = ev.get("rows", self.rows)
        self.features = ev.get("features", self.features)
        self.members_target = ev.get("members_target", self.members_target)
        self.pid = ev.get("pid")
        self.pid_started = ev.get("pid_started")
        self.host = ev.get("host")
        self.threads = ev.get("threads")
        self.cluster = cluster_of(ev)
        self.config = ev.get("config", self.config)
        self.resolved = ev.get("resolved", self.resolved)
        self.version = ev.get("version", self.version)
        self.feature_names = [str(f) for f in ev.get("feature_names") or self.feature_names]
        self.resumed = bool(ev.get("resumed", self.starts > 1))
        self.first_member = first
        if self.started_t is None:
            self.started_t = ev.get("t")
        self.status = "running"
        self.reason = None
        n = len(self.curve_member)
        while len(self.curve_class) < len(classes):
            self.curve_class.append(array("f", [math.nan]) * n)
        # A resumed job goes on from its checkpoint: members journaled after it are grown again.
        self._truncate(first)

    def _truncate(self, member: int) -> None:
        """Drop the curve after `member` members."""
        cut = bisect_left(self.curve_member, member + 1)
        if cut == len(self.curve_member):
            return
        for arr in (self.curve_member, self.curve_error, self.curve_lo, self.curve_hi, self.curve_r2,
                    self.curve_raw, *self.curve_class):
            del arr[cut:]
        self._drawn.clear()
        self.measures.truncate(member)
        self.members = member
        if self.measure_estimate is not None and self.measure_estimate["member"] > member:
            self.measure_estimate = None
        if self.fit is not None and self.fit["member"] > member:
            self.fit = None     # the member lines that follow bring the fit again
        # The latest figures now come from the curve; coverage and confusion are unknown until the next line.
        if cut:
            i = cut - 1
            lo, hi = self.curve_lo[i], self.curve_hi[i]
            self._last = {"member": self.curve_member[i], "error": _none_if_nan(self.curve_error[i]),
                          "interval": None if lo != lo else [lo, hi],
                          "class_error": [_none_if_nan(c[i]) for c in self.curve_class],
                          "r2": _none_if_nan(self.curve_r2[i]), "restored": True}
        else:
            self._last = None

    def _member(self, ev: dict) -> None:
        m = int(ev["member"])
        err = ev.get("error")
        err = NAN if err is None else float(err)
        iv = ev.get("interval")
        if iv:
            lo, hi = iv
            lo = NAN if lo is None else float(lo)
            hi = NAN if hi is None else float(hi)
        else:
            lo = hi = NAN
        r2 = ev.get("r2")
        r2 = NAN if r2 is None else float(r2)
        ce = ev.get("class_error") or ()
        ce = [NAN if c is None else float(c) for c in ce]
        raw = ev.get("raw_error", err)      # lines written before the estimate: error was the textbook one
        raw = NAN if raw is None else float(raw)
        fit = _fit(ev.get("curve"), m)
        # Everything converted: now the arrays grow together or not at all.
        cm = self.curve_member
        if cm and m <= cm[-1]:
            self._truncate(m - 1)      # a member journaled twice: the later line wins
        curves = self.curve_class
        if len(curves) < len(ce):
            n = len(cm)
            while len(curves) < len(ce):
                curves.append(array("f", [NAN]) * n)
        cm.append(m)
        self.curve_error.append(err)
        self.curve_lo.append(lo)
        self.curve_hi.append(hi)
        self.curve_r2.append(r2)
        self.curve_raw.append(raw)
        if fit is not None:
            self.fit = fit
        me = ev.get("measure_estimate")
        if isinstance(me, dict):
            self.measure_estimate = dict(me, member=m)
        k = len(ce)
        for j, c in enumerate(curves):
            c.append(ce[j] if j < k else NAN)
        self.members = m
        el = ev.get("elapsed")
        if el is not None:
            self.elapsed = float(el)
        self._last = ev
        self.measures.fold(m, ev.get("measures"), ev.get("importance"))

    def _end(self, ev: dict) -> None:
        status = ev.get("status")
        self.status = status if status in END_STATUSES else "failed"
        self.reason = ev.get("reason")
        if ev.get("elapsed") is not None:
            self.elapsed = float(ev["elapsed"])
        est = ev.get("estimate")
        if isinstance(est, dict) and self._last is not None:
            # the saved ensemble's own estimate (over every row) replaces the run's last refit
            fit = _fit(est.get("curve"), int(ev.get("member") or self.members))
            self._last = {**self._last, **{k: v for k, v in est.items() if k != "curve"}}
            if fit is not None:
                self.fit = fit
            me = est.get("measure_estimate")
            if isinstance(me, dict):
                self.measure_estimate = dict(me, member=int(ev.get("member") or self.members))

    # -- the latest figures, from the last member line

    def _get(self, name):
        return None if self._last is None else self._last.get(name)

    @property
    def error(self) -> float | None:
        return _opt(self._get("error"))

    @property
    def interval(self) -> tuple[float, float] | None:
        iv = self._get("interval")
        if not iv or iv[0] is None or iv[1] is None:
            return None
        return (float(iv[0]), float(iv[1]))

    @property
    def class_error(self) -> list:
        return [_opt(c) for c in self._get("class_error") or []]

    @property
    def coverage(self) -> float | None:
        return _opt(self._get("coverage"))

    @property
    def oob_rows(self) -> int | None:
        return self._get("oob_rows")

    @property
    def confusion(self) -> list | None:
        conf = self._get("confusion")
        if not isinstance(conf, list):
            return None
        try:
            return [[int(c) for c in row] for row in conf]
        except (TypeError, ValueError):
            return None

    @property
    def r2(self) -> float | None:
        return _opt(self._get("r2"))

    @property
    def rate(self) -> float | None:
        return _opt(self._get("rate"))

    @property
    def raw_error(self) -> float | None:
        """The textbook OOB error after the latest member."""
        return _opt(self._get("raw_error"))

    @property
    def error_limit(self) -> float | None:
        return _opt(self._get("error_limit"))

    @property
    def error_limit_interval(self) -> tuple[float, float] | None:
        iv = self._get("error_limit_interval")
        if not iv or iv[0] is None or iv[1] is None:
            return None
        return (float(iv[0]), float(iv[1]))

    @property
    def members_needed(self) -> int | None:
        v = self._get("members_needed")
        return int(v) if isinstance(v, (int, float)) and v == v else None

    def estimate_figures(self) -> dict:
        """The latest line's textbook error and the estimated limit, as report figures."""
        iv = self._get("raw_interval")
        lim = self.error_limit_interval
        return {"raw_error": self.raw_error,
                "raw_interval": None if not iv or None in iv else [float(v) for v in iv],
                "error_limit": self.error_limit, "error_limit_interval": None if lim is None else list(lim),
                "members_needed": self.members_needed}

    @property
    def member_t(self) -> float | None:
        """t of the latest member line."""
        if self._last is None or self._last.get("restored"):
            return None
        return _opt(self._last.get("t"))

    # -- reading figures

    def class_figures(self) -> list[dict]:
        """Per class: name, rows, share of rows, OOB error, OOB-covered rows and Wilson 95% interval."""
        total = sum(self.class_rows) or (self.rows or 0)
        errors = self.class_error
        conf = self.confusion
        out = []
        for k, name in enumerate(self.classes):
            rows = self.class_rows[k] if k < len(self.class_rows) else None
            err = errors[k] if k < len(errors) else None
            covered = int(sum(conf[k])) if conf is not None and k < len(conf) else None
            out.append({
                "name": name, "rows": rows,
                "share": rows / total if rows is not None and total else None,
                "error": err, "covered": covered,
                "interval": class_interval(err, covered) if covered else None,
            })
        return out

    def curve(self, series="error", width: int = 200, log: bool = False) -> tuple[list, list]:
        """The curve of one series downsampled to at most `width` points: "error", "lo", "hi", "r2", "raw"
        (the textbook OOB error) or a class index."""
        if isinstance(series, int):
            ys = self.curve_class[series] if series < len(self.curve_class) else array("f")
        else:
            ys = {"error": self.curve_error, "lo": self.curve_lo, "hi": self.curve_hi, "r2": self.curve_r2,
                  "raw": self.curve_raw}[series]
        return downsample(self.curve_member, ys, width, log=log, cache=self._drawn.setdefault((series, log), {}))

    def eta(self) -> float | None:
        """Seconds left at the recent rate, None when unknown."""
        rate = self.rate
        if not rate or not self.members_target or self.status != "running":
            return None
        return max(0.0, (self.members_target - self.members) / rate)

    def curve_bytes(self) -> int:
        """Memory held by the curve arrays."""
        arrs = [self.curve_member, self.curve_error, self.curve_lo, self.curve_hi, self.curve_r2, self.curve_raw,
                *self.curve_class]
        return sum(a.buffer_info()[1] * a.itemsize for a in arrs)


def _fit(got, member: int) -> dict | None:
    """A journal line's curve over sizes as drawn (NaN for gaps); ValueError when damaged."""
    if not isinstance(got, dict):
        return None
    fit = {"member": member, **{k: [NAN if v is None else float(v) for v in got.get(k) or []]
                                for k in ("b", "error", "lo", "hi")}}
    fit["class_error"] = [[NAN if v is None else float(v) for v in c] for c in got.get("class_error") or []]
    n = len(fit["b"])
    if not (len(fit["error"]) == len(fit["lo"]) == len(fit["hi"]) == n) or any(len(c) != n for c in fit["class_error"]):
        raise ValueError("a curve's lists differ in length")
    return fit


def _none_if_nan(v):
    return None if v != v else float(v)


def read_state(run_dir) -> RunState:
    """The state of a run directory's whole journal, read once."""
    state = RunState()
    reader = JournalReader(Path(run_dir) / JOURNAL)
    while reader.read_into(state.fold, 1 << 20) or reader.pending_bytes():
        pass
    return state

