"""A View: the figures of one redraw, copied out of the shared RunState under its lock."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from baggr.runs.journal import MEASURE_LABELS as LABELS, RunState, chosen_measure as chosen


@dataclass
class View:
    """Everything the panels draw, as plain values (no references into the live state)."""

    run_name: str
    status: str                     # waiting, running, finished, stopped, failed, crashed
    reason: str | None = None
    task: str | None = None
    classes: list = field(default_factory=list)
    rows: int | None = None
    features: int | None = None
    members: int = 0
    members_target: int | None = None
    error: float | None = None
    interval: tuple | None = None
    class_figures: list = field(default_factory=list)
    coverage: float | None = None
    confusion: list | None = None
    r2: float | None = None
    elapsed: float = 0.0
    rate: float | None = None
    eta: float | None = None
    pid: int | None = None
    pid_started: float | None = None
    host: str | None = None
    cluster: dict | None = None     # where the members grow (journal.cluster_of); None: local threads
    resumed: bool = False
    last_checkpoint: int | None = None
    quiet_for: float | None = None  # seconds since the last journal line, while running
    warnings: list = field(default_factory=list)
    unreadable: int = 0             # malformed lines plus events that did not make sense
    stop_requested: bool = False
    log_x: bool = False
    highlight: int | None = None
    curves: dict = field(default_factory=dict)   # series -> (xs, ys), downsampled for drawing
    # the estimated error of the kept ensemble over sizes, from the run's latest refit (None before)
    fit: dict | None = None
    raw_error: float | None = None  # the textbook OOB error after the latest member
    error_limit: float | None = None
    error_limit_interval: tuple | None = None
    members_needed: int | None = None
    show_raw: bool = True           # draw the textbook curve (faint) beside the estimate
    config: dict | None = None      # the start line's settings
    resolved: dict | None = None    # what the data chose for the unset ones (task, features per split, ...)
    version: int = 0                # events folded so far: the curve changed when this did
    measure: str | None = None      # the measure shown (m cycles); the run's chosen one at first
    chosen_measure: str | None = None
    measure_value: tuple | None = None   # (value, lo, hi) of the shown measure at its latest point
    # the shown measure's estimate for the kept ensemble (the latest refit's, or the saved ensemble's
    # at the end): value, interval, limit, members_needed and its curve {b, error, lo, hi}; None before
    measure_fit: dict | None = None
    importance: list = field(default_factory=list)   # (feature, mean, se), largest mean first

    @property
    def measure_label(self) -> str:
        return LABELS.get(self.measure or "", self.measure or "")

    @property
    def per_member(self) -> bool:
        """Whether the curve shows the per-member error (MSE), not a measure's points."""
        return self.measure in (None, "error", "mse")

    @property
    def is_classes(self) -> bool:
        return self.task != "regression"


def make_view(state: RunState, *, run_name: str, status: str, now: float, width: int, log_x: bool,
              highlight: int | None, stop_requested: bool, malformed: int, curves: bool = True,
              measure: str | None = None, show_raw: bool = True) -> View:
    """Copy the figures out of `state` (call with its lock held); curves downsampled to `width` points
    (none when `curves` is false: a redraw that does not build the plot)."""
    running = status == "running"
    elapsed = state.elapsed
    if running and state.member_t is not None:
        elapsed += max(0.0, now - state.member_t)   # the clock goes on between member lines
    want_curves, curves = curves, {}
    if want_curves and state.curve_member:
        series = ["error", "lo", "hi", "raw"]
        if state.task == "regression":
            series.append("r2")
        series += list(range(len(state.curve_class)))
        for s in series:
            curves[s] = state.curve(s, width=width, log=log_x)
    the_chosen = chosen(state.config, state.task)
    measure = measure or the_chosen
    if want_curves and measure not in ("error", "mse"):
        xs, v, lo, hi = state.measures.curve(measure)     # a point a scheduled size: a few dozen
        curves["m"], curves["m_lo"], curves["m_hi"] = (xs, v), (xs, lo), (xs, hi)
    latest = state.measures.latest(measure)
    me = state.measure_estimate
    measure_fit = dict(me) if isinstance(me, dict) and me.get("name") == measure else None
    if measure_fit is not None:
        # the estimate read at the members so far, like the error's (its textbook points stay in curves)
        at = _read_fit(measure_fit, state.members)
        if at is not None:
            latest = at
    imp = state.measures.importance
    names = state.feature_names
    importance = []
    if imp and names and len(imp.get("mean") or []) == len(names):
        importance = sorted(((n, m, e) for n, m, e in zip(names, imp["mean"], imp.get("se") or [None] * len(names))
                             if m is not None), key=lambda r: -r[1])
    return View(
        run_name=run_name, status=status, reason=state.reason, task=state.task,
        classes=list(state.classes), rows=state.rows, features=state.features,
        members=state.members, members_target=state.members_target,
        error=state.error, interval=state.interval, class_figures=state.class_figures(),
        coverage=state.coverage, confusion=[list(r) for r in state.confusion] if state.confusion else None,
        r2=state.r2, elapsed=elapsed, rate=state.rate, eta=state.eta() if running else None,
        pid=state.pid, pid_started=state.pid_started, host=state.host, cluster=state.cluster, resumed=state.resumed,
        last_checkpoint=state.last_checkpoint,
        quiet_for=(now - state.last_t) if running and state.last_t is not None else None,
        warnings=list(state.warnings)[-3:], unreadable=malformed + state.unreadable,
        stop_requested=stop_requested, log_x=log_x, highlight=highlight, curves=curves,
        version=state.events, config=dict(state.config) if isinstance(state.config, dict) else None,
        fit=None if state.fit is None else dict(state.fit), raw_error=state.raw_error, error_limit=state.error_limit,
        error_limit_interval=state.error_limit_interval, members_needed=state.members_needed, show_raw=show_raw,
        resolved=dict(state.resolved) if isinstance(state.resolved, dict) else None,
        measure=measure, chosen_measure=the_chosen, measure_value=latest, importance=importance,
        measure_fit=measure_fit,
    )


def _read_fit(fit: dict, members: int) -> tuple | None:
    """(value, lo, hi) of a fitted curve at `members`, linear between its sizes; None without one."""
    iv = fit.get("interval") or (None, None)
    if fit.get("value") is not None and fit.get("member") == members:
        return fit["value"], iv[0], iv[1]          # fitted at this size: its own figures
    c = fit.get("curve") or {}
    b, e, lo, hi = c.get("b") or [], c.get("error") or [], c.get("lo") or [], c.get("hi") or []
    if not b or not (len(b) == len(e) == len(lo) == len(hi)) or members < 1:
        return None if fit.get("value") is None else (fit["value"], iv[0], iv[1])
    # np.interp holds the ends beyond the fitted sizes
    return tuple(float(np.interp(members, b, a)) for a in (e, lo, hi))
