"""The measures and the importance as the journal tells them: the points at the log-spaced sizes
where the job computed them (member lines that carry "measures"), folded line by line. Pure Python."""
from __future__ import annotations

import math
from array import array
from bisect import bisect_left

# the measures' names by task, as `--measure` spells them (baggr.config holds the same tuples;
# not imported: the dashboard reads this module and keeps its imports few)
CLASS_MEASURES = ("error", "balanced-error", "log-loss", "brier", "auc")
REGRESSION_MEASURES = ("mse", "rmse", "mae", "r2")
BY_TASK = {"classes": CLASS_MEASURES, "regression": REGRESSION_MEASURES}
LABELS = {"error": "OOB error", "balanced-error": "balanced error", "log-loss": "log loss", "brier": "Brier score",
          "auc": "AUC", "mse": "OOB MSE", "rmse": "RMSE", "mae": "MAE", "r2": "R2"}


def _f(v) -> float:
    return math.nan if v is None else float(v)


class MeasurePoints:
    """Per measure: the members at which it was computed and its value and 95% interval there."""

    def __init__(self):
        self.members = array("i")
        self.series: dict[str, tuple] = {}     # name -> (value, lo, hi) arrays aligned with members
        self.importance: dict | None = None     # the latest {"mean", "se"} lists
        self._importance_at = 0

    def fold(self, m: int, measures: dict | None, importance: dict | None) -> None:
        """Take the measures (and importance) of member line m, when it carries them."""
        if importance is not None:
            self.importance, self._importance_at = importance, m
        if not measures:
            return
        rows = {str(k): (_f(v[0]), _f(v[1]), _f(v[2])) for k, v in measures.items()}   # converted first
        if self.members and m <= self.members[-1]:
            self.truncate(m - 1)
        n = len(self.members)
        for name in rows:
            if name not in self.series:
                self.series[name] = (array("d", [math.nan]) * n, array("d", [math.nan]) * n,
                                     array("d", [math.nan]) * n)
        self.members.append(m)
        for name, (v, lo, hi) in self.series.items():
            got = rows.get(name, (math.nan, math.nan, math.nan))
            v.append(got[0])
            lo.append(got[1])
            hi.append(got[2])

    def truncate(self, member: int) -> None:
        """Drop the points after `member` members (a resumed job grows them again)."""
        cut = bisect_left(self.members, member + 1)
        del self.members[cut:]
        for arrs in self.series.values():
            for a in arrs:
                del a[cut:]
        if self._importance_at > member:
            self.importance, self._importance_at = None, 0

    def names(self, task: str | None) -> list[str]:
        """The measures of the task in their usual order (those the journal has, if it has any)."""
        order = CLASS_MEASURES if task != "regression" else REGRESSION_MEASURES
        return [n for n in order if n in self.series] or list(order)

    def latest(self, name: str) -> tuple | None:
        """(value, lo, hi) at the last point, None when there is none."""
        arrs = self.series.get(name)
        if not arrs or not self.members:
            return None
        return arrs[0][-1], arrs[1][-1], arrs[2][-1]

    def curve(self, name: str) -> tuple[list, list, list, list]:
        """(members, values, lows, highs) of one measure."""
        arrs = self.series.get(name)
        if not arrs:
            return [], [], [], []
        return list(self.members), list(arrs[0]), list(arrs[1]), list(arrs[2])


def chosen(config: dict | None, task: str | None) -> str:
    """The measure a run is judged by, from its settings."""
    name = (config or {}).get("measure")
    names = CLASS_MEASURES if task != "regression" else REGRESSION_MEASURES
    return name if name in names else names[0]
