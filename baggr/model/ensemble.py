"""Ensemble: the trained members, their binning and schema, and the OOB results; scoring new tables."""
from __future__ import annotations

import numpy as np

from baggr import data
from baggr.config import Config
from baggr.errors import BaggrError
from baggr.model import file
from baggr.model.compact import Compact, kind_for
from baggr.model.forest import Forest
from baggr.oob.view import OOB
from baggr.model.scoring import score


class Ensemble:
    """A trained bagged tree ensemble. `oob` holds its out-of-bag estimate.

    forest: the learner's node arrays (a Forest: after training, or read from a version-1 file),
    or only the compact forest scoring walks (read from a version-2 file); None when estimate-only.
    """

    def __init__(self, schema, binning, config: Config, forest: Forest | Compact | None, oob: OOB, stats: dict):
        self.schema, self.binning, self.config = schema, binning, config
        self.forest, self.oob, self.stats = forest, oob, stats
        oob.features = list(schema.names)
        self._compact = forest if isinstance(forest, Compact) else None

    @property
    def compact(self) -> Compact | None:
        """The trees as scoring walks them (packed from the Forest on first use)."""
        if self._compact is None and self.forest is not None:
            self._compact = Compact.from_forest(self.forest, kind_for(self.task, self.config.vote))
        return self._compact

    @property
    def task(self) -> str:
        return self.schema.task

    @property
    def classes(self) -> list:
        return list(self.schema.classes)

    @property
    def members(self) -> int:
        return self.oob.members

    def _scores(self, X, threads: int | None) -> np.ndarray:
        if self.forest is None or self.forest.members == 0:
            raise BaggrError("this ensemble was trained estimate-only (keep_members=False): "
                             "it has no trees to score new rows")
        if isinstance(X, (str, bytes)) or hasattr(X, "__fspath__"):
            X = data.read_table(X)
        codes = data.encode(X, self.schema, self.binning)
        return score(codes, self.compact, threads=threads)

    def vote_shares(self, X, threads: int | None = None) -> np.ndarray:
        """(n, C) share of the members' votes for each class (hard votes, or mean leaf shares).
        threads: None uses every core; the figures are the same for any number."""
        if self.task != "classes":
            raise BaggrError("vote shares are for classes; this ensemble does regression (use predict)")
        return self._scores(X, threads) / self.forest.members

    def predict(self, X, threads: int | None = None) -> np.ndarray:
        """Class labels (ties to the first class in label order) or regression means for new rows.
        threads: None uses every core; the figures are the same for any number."""
        s = self._scores(X, threads)
        if self.task == "classes":
            return np.array(self.classes, dtype=object)[np.argmax(s, axis=1)]
        return s[:, 0] / self.forest.members

    def save(self, path, *, compress: bool = False) -> None:
        """Write the model file (trees, binning, schema, OOB results) to path, atomically.
        compress: deflate the arrays (smaller; loading then inflates them instead of mapping them)."""
        file.save(self, path, compress=compress)

    def __repr__(self) -> str:
        e = self.oob.error
        what = "OOB error" if self.task == "classes" else "OOB MSE"
        return f"<baggr.Ensemble {self.task}, {self.members} members, {what} {e:.4g}>"


def load(path) -> Ensemble:
    """Read a model file; any damage gives a ModelFileError naming the problem."""
    return Ensemble(*file.read(path))
