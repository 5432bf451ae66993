"""Ensemble: the trained members, their binning and schema, and the OOB results; scoring new tables."""
from __future__ import annotations

import numpy as np

from baggr import data
from baggr.config import Config
from baggr.errors import BaggrError
from baggr.model import file
from baggr.model.forest import Forest
from baggr.oob.view import OOB
from baggr.model.scoring import score


class Ensemble:
    """A trained bagged tree ensemble. `oob` holds its out-of-bag estimate."""

    def __init__(self, schema, binning, config: Config, forest: Forest | None, oob: OOB, stats: dict):
        self.schema, self.binning, self.config = schema, binning, config
        self.forest, self.oob, self.stats = forest, oob, stats

    @property
    def task(self) -> str:
        return self.schema.task

    @property
    def classes(self) -> list:
        return list(self.schema.classes)

    @property
    def members(self) -> int:
        return self.oob.members

    def _scores(self, X) -> np.ndarray:
        if self.forest is None or self.forest.members == 0:
            raise BaggrError("this ensemble was trained estimate-only (keep_members=False): "
                             "it has no trees to score new rows")
        if isinstance(X, (str, bytes)) or hasattr(X, "__fspath__"):
            X = data.read_table(X)
        codes = data.encode(X, self.schema, self.binning)
        hard = self.task == "classes" and self.config.vote == "hard"
        return score(codes, self.forest, hard=hard, threads=self.config.resolved_threads())

    def vote_shares(self, X) -> np.ndarray:
        """(n, C) share of the members' votes for each class (hard votes, or mean leaf shares)."""
        if self.task != "classes":
            raise BaggrError("vote shares are for classes; this ensemble does regression (use predict)")
        return self._scores(X) / self.forest.members

    def predict(self, X) -> np.ndarray:
        """Class labels (ties to the first class in label order) or regression means for new rows."""
        s = self._scores(X)
        if self.task == "classes":
            return np.array(self.classes, dtype=object)[np.argmax(s, axis=1)]
        return s[:, 0] / self.forest.members

    def save(self, path) -> None:
        """Write the model file (trees, binning, schema, OOB results) to path, atomically."""
        file.save(self, path)

    def __repr__(self) -> str:
        e = self.oob.error
        what = "OOB error" if self.task == "classes" else "OOB MSE"
        return f"<baggr.Ensemble {self.task}, {self.members} members, {what} {e:.4g}>"


def load(path) -> Ensemble:
    """Read a model file; any damage gives a ModelFileError naming the problem."""
    return Ensemble(*file.read(path))
