"""Config: the settings of a training run, validated in one place."""
from __future__ import annotations

import dataclasses
import math
import os
from dataclasses import dataclass

from baggr.errors import ConfigError

DRAWS = ("bootstrap", "balanced", "subsample")
CRITERIA = ("gini", "entropy", "variance")
TASKS = ("classes", "regression")
VOTES = ("hard", "shares")
# the measures' names as `--measure` spells them (their definitions: baggr/oob/measures.py)
CLASS_MEASURES = ("error", "balanced-error", "log-loss", "brier", "auc")
REGRESSION_MEASURES = ("mse", "rmse", "mae", "r2")
MEASURES = CLASS_MEASURES + REGRESSION_MEASURES


@dataclass(frozen=True)
class Config:
    """Settings of a run. None means "choose for the data" where noted."""

    members: int = 100
    features_per_split: str | int | float | None = None  # None: "sqrt" for classes, 1/3 for regression
    min_leaf: int = 1                  # fewest in-bag draws in a leaf
    depth_limit: int | None = None     # None: grow until pure or min_leaf
    bins: int = 255                    # value bins per numeric feature (plus one missing bin)
    draw: str = "bootstrap"
    draw_fraction: float = 0.632       # share of rows drawn by "subsample"
    criterion: str | None = None       # None: "gini" for classes, "variance" for regression
    vote: str = "hard"                 # OOB and scoring votes: "hard" or leaf class "shares"
    task: str | None = None            # None: from the target's type (floats are regression)
    seed: int = 0
    threads: int | None = None         # None: all cores
    keep_members: bool = True          # False: estimate-only run, trees dropped after their tally
    importance: bool = False           # OOB permutation importance per member (Breiman 2001), and impurity decrease
    measure: str | None = None         # the figure a run is judged by (None: "error" for classes, "mse" for regression)

    def __post_init__(self):
        _check(isinstance(self.members, int) and not isinstance(self.members, bool) and self.members >= 1,
               f"members must be a whole number >= 1, got {self.members!r}")
        _check(isinstance(self.min_leaf, int) and self.min_leaf >= 1,
               f"min_leaf must be a whole number >= 1, got {self.min_leaf!r}")
        _check(self.depth_limit is None or (isinstance(self.depth_limit, int) and self.depth_limit >= 0),
               f"depth_limit must be a whole number >= 0 (or unset: no limit), got {self.depth_limit!r}")
        _check(isinstance(self.bins, int) and 2 <= self.bins <= 255,
               f"bins must be between 2 and 255, got {self.bins!r}")
        _check(self.draw in DRAWS, f"draw must be one of {', '.join(DRAWS)}, got {self.draw!r}")
        _check(isinstance(self.draw_fraction, (int, float)) and 0.0 < self.draw_fraction < 1.0,
               f"draw_fraction must be between 0 and 1 (exclusive), got {self.draw_fraction!r}")
        _check(self.criterion is None or self.criterion in CRITERIA,
               f"criterion must be one of {', '.join(CRITERIA)}, got {self.criterion!r}")
        _check(self.vote in VOTES, f"vote must be one of {', '.join(VOTES)}, got {self.vote!r}")
        _check(self.task is None or self.task in TASKS,
               f"task must be one of {', '.join(TASKS)}, got {self.task!r}")
        _check(isinstance(self.seed, int) and self.seed >= 0, f"seed must be a whole number >= 0, got {self.seed!r}")
        _check(self.threads is None or (isinstance(self.threads, int) and self.threads >= 1),
               f"threads must be a whole number >= 1 (or unset: all cores), got {self.threads!r}")
        _check(isinstance(self.importance, bool), f"importance must be True or False, got {self.importance!r}")
        _check(self.measure is None or self.measure in MEASURES,
               f"measure must be one of {', '.join(MEASURES)}, got {self.measure!r}")
        f = self.features_per_split
        ok = (f is None or f in ("sqrt", "log2")
              or (isinstance(f, int) and not isinstance(f, bool) and f >= 1)
              or (isinstance(f, float) and 0.0 < f <= 1.0))
        _check(ok, "features_per_split must be 'sqrt', 'log2', a whole number >= 1 "
                   f"or a fraction in (0, 1], got {f!r}")

    def resolved_criterion(self, task: str) -> str:
        """The criterion for a task, checking it fits."""
        crit = self.criterion or ("gini" if task == "classes" else "variance")
        if task == "regression" and crit != "variance":
            raise ConfigError(f"criterion {crit!r} is for classes; regression uses 'variance'")
        if task == "classes" and crit == "variance":
            raise ConfigError("criterion 'variance' is for regression; classes use 'gini' or 'entropy'")
        return crit

    def resolved_features(self, n_features: int, task: str) -> int:
        """How many features to try at each split, for a table of n_features."""
        f = self.features_per_split
        if f is None:
            f = "sqrt" if task == "classes" else 1.0 / 3.0
        if f == "sqrt":
            k = int(math.sqrt(n_features))
        elif f == "log2":
            k = int(math.log2(n_features)) if n_features > 1 else 1
        elif isinstance(f, float):
            k = int(f * n_features)
        else:
            if f > n_features:
                raise ConfigError(f"features_per_split is {f} but the table has only {n_features} features")
            k = f
        return max(1, min(k, n_features))

    def features_rule(self, task: str) -> str:
        """The rule features_per_split follows, in words: "sqrt", "log2", "1/3", "0.5" or "4" (a count)."""
        f = self.features_per_split
        if f is None:
            return "sqrt" if task == "classes" else "1/3"
        return str(f)

    def resolved(self, n_features: int, task: str, task_given: bool | None = None) -> dict:
        """The settings left to the data, as this run chose them (plain values, for JSON and reports).

        task_given: whether the task was asked for (default: whether config.task is set).
        """
        return {"task": task, "task_from": "asked" if (self.task is not None if task_given is None else task_given)
                else "the target",
                "features_per_split": self.resolved_features(n_features, task),
                "features_rule": self.features_rule(task), "features": n_features,
                "criterion": self.resolved_criterion(task), "threads": self.resolved_threads()}

    def resolved_measure(self, task: str) -> str:
        """The measure a run is judged by, checking it fits the task."""
        names = CLASS_MEASURES if task == "classes" else REGRESSION_MEASURES
        if self.measure is None:
            return names[0]
        if self.measure not in names:
            kind = "classes" if task == "classes" else "a regression target"
            raise ConfigError(f"measure {self.measure!r} does not fit {kind}; use one of {', '.join(names)}")
        return self.measure

    def resolved_threads(self) -> int:
        """Local threads to use."""
        return self.threads or (len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1)

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)

    @classmethod
    def from_dict(cls, d: dict) -> "Config":
        names = {f.name for f in dataclasses.fields(cls)}
        unknown = set(d) - names
        if unknown:
            raise ConfigError(f"unknown settings: {', '.join(sorted(unknown))}")
        return cls(**d)

    def replace(self, **changes) -> "Config":
        return dataclasses.replace(self, **changes)


def _check(ok: bool, message: str) -> None:
    if not ok:
        raise ConfigError(message)
