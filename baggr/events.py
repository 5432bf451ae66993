"""The event the training loop sends after every member (to on_member, the journal, the progress bar)."""
from __future__ import annotations

import math
from dataclasses import dataclass, field


@dataclass
class MemberEvent:
    """Figures after `member` members (1-based: the ensemble size this event describes)."""

    member: int
    members_target: int
    elapsed: float                  # seconds of training so far (summed over resumes)
    error: float                    # OOB misclassification rate or MSE; NaN while no row was OOB
    interval: tuple | None
    coverage: float                 # share of rows with at least one OOB vote
    oob_rows: int                   # OOB rows of this member
    class_error: list = field(default_factory=list)
    confusion: list | None = None
    r2: float | None = None
    rate: float = 0.0               # members per second, recent
    measures: dict | None = None    # {name: (value, interval)} at the measure curve's sizes, else None
    importance: dict | None = None  # {"mean": [...], "se": [...]} per feature, at the same sizes (--importance)

    def journal_fields(self) -> dict:
        """Fields for the journal's member line (strict JSON: NaN becomes null)."""
        d = {"member": self.member, "elapsed": round(self.elapsed, 4), "error": _num(self.error),
             "interval": None if self.interval is None else [_num(v) for v in self.interval],
             "class_error": [_num(v) for v in self.class_error], "coverage": _num(self.coverage),
             "oob_rows": self.oob_rows, "rate": round(self.rate, 4)}
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


def _num(v):
    if v is None:
        return None
    v = float(v)
    return None if math.isnan(v) or math.isinf(v) else v
