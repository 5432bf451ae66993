"""The event the training loop sends after every member (to on_member, the journal, the progress bar)."""
from __future__ import annotations

import math
from dataclasses import dataclass, field


@dataclass
class MemberEvent:
    """Figures after `member` members (1-based: the ensemble size this event describes).

    error, interval and class_error estimate the error of the kept `member`-member ensemble
    (baggr/oob/curve.py, from the run's latest refit); raw_error and raw_interval are the
    textbook OOB figures after `member` members. `curve` is set after a refit: the estimated
    curve at some ensemble sizes, for drawing.
    """

    member: int
    members_target: int
    elapsed: float                  # seconds of training so far (summed over resumes)
    error: float                    # estimated misclassification rate or MSE; NaN while no row was OOB
    interval: tuple | None
    coverage: float                 # share of rows with at least one OOB vote
    oob_rows: int                   # OOB rows of this member
    class_error: list = field(default_factory=list)
    confusion: list | None = None
    r2: float | None = None
    rate: float = 0.0               # members per second, recent
    measures: dict | None = None    # {name: (value, interval)} at the measure curve's sizes, else None
    importance: dict | None = None  # {"mean": [...], "se": [...]} per feature, at the same sizes (--importance)
    raw_error: float = math.nan     # textbook OOB error after `member` members
    raw_interval: tuple | None = None
    raw_class_error: list = field(default_factory=list)
    error_limit: float = math.nan   # estimated error of an unlimited ensemble
    error_limit_interval: tuple | None = None
    members_needed: int | None = None
    curve: dict | None = None       # {"b": sizes, "error", "lo", "hi": lists, "class_error": one per class}
    # after a refit, when the run is judged by a measure other than the error (MSE): that measure's
    # estimate {name, value, interval, limit, limit_interval, members_needed, curve} (baggr/oob/measure_fit.py)
    measure_estimate: dict | None = None

    estimate_fields = staticmethod(lambda d: _estimate_fields(d))

    def journal_fields(self) -> dict:
        """Fields for the journal's member line (strict JSON: NaN becomes null)."""
        d = {"member": self.member, "elapsed": round(self.elapsed, 4), "error": _num(self.error),
             "interval": None if self.interval is None else [_num(v) for v in self.interval],
             "class_error": [_num(v) for v in self.class_error], "coverage": _num(self.coverage),
             "oob_rows": self.oob_rows, "rate": round(self.rate, 4)}
        d["raw_error"] = _num(self.raw_error)
        d["raw_interval"] = None if self.raw_interval is None else [_num(v) for v in self.raw_interval]
        if self.raw_class_error:
            d["raw_class_error"] = [_num(v) for v in self.raw_class_error]
        d["error_limit"] = _num(self.error_limit)
        d["error_limit_interval"] = (None if self.error_limit_interval is None
                                     else [_num(v) for v in self.error_limit_interval])
        d["members_needed"] = self.members_needed
        if self.curve is not None:
            d["curve"] = _estimate_fields({"curve": self.curve})["curve"]
        if self.measure_estimate is not None:
            d["measure_estimate"] = measure_fields(self.measure_estimate)
        if self.confusion is not None:
            d["confusion"] = self.confusion
        if self.r2 is not None:
            d["r2"] = _num(self.r2)
        if self.measures is not None:
            d["measures"] = {k: [_num(v), *([_num(x) for x in iv] if iv is not None else [None, None])]
                             for k, (v, iv) in self.measures.items()}
        if self.importance is not None:
            d["importance"] = self.importance
        return d


def measure_fields(d: dict) -> dict:
    """A measure's estimate (OOB.measure_estimate, Tally.measure_live) in strict JSON; its curve as
    curve.Fit.points gives it ("error" there holds the measure's values)."""
    iv = lambda x: None if x is None else [_num(v) for v in x]  # noqa: E731
    out = {"name": d.get("name"), "value": _num(d.get("value")), "interval": iv(d.get("interval")),
           "limit": _num(d.get("limit")), "limit_interval": iv(d.get("limit_interval")),
           "members_needed": d.get("members_needed")}
    c = d.get("curve")
    if c is not None:
        out["curve"] = {k: [int(v) for v in vs] if k == "b" else [_num(v) for v in vs]
                        for k, vs in c.items() if k != "class_error"}
    return out


def _estimate_fields(d: dict) -> dict:
    """An estimate's figures (OOB.figures) in strict JSON."""
    out = {"error": _num(d.get("error")), "interval": None if d.get("interval") is None else
           [_num(v) for v in d["interval"]], "error_limit": _num(d.get("error_limit")),
           "error_limit_interval": None if d.get("error_limit_interval") is None else
           [_num(v) for v in d["error_limit_interval"]], "members_needed": d.get("members_needed")}
    if "class_error" in d:
        out["class_error"] = [_num(v) for v in d["class_error"]]
    if d.get("measure_estimate"):
        out["measure_estimate"] = measure_fields(d["measure_estimate"])
    c = d.get("curve")
    if c is not None:
        out["curve"] = {k: ([int(v) for v in vs] if k == "b" else [[_num(v) for v in col] for col in vs]
                            if k == "class_error" else [_num(v) for v in vs]) for k, vs in c.items()}
    return out


def _num(v):
    if v is None:
        return None
    v = float(v)
    return None if math.isnan(v) or math.isinf(v) else v
