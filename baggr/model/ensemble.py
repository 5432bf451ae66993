"""Ensemble: the trained members, their binning and schema, and the OOB results; scoring new tables."""
from __future__ import annotations

import numpy as np

from baggr import data
from baggr.config import Config
from baggr.errors import BaggrError
from baggr.model import file
from baggr.model.compact import Compact, Stack, kind_for
from baggr.model.forest import Forest
from baggr.oob.view import OOB
from baggr.model.scoring import score


class Ensemble:
    """A trained bagged tree ensemble. `oob` holds its out-of-bag estimate.

    forest: the kept trees as scoring walks them (a Compact; a Stack of them, read from a model file
    a run wrote as it went), or the learner's node arrays (a Forest, read from a version-1 file);
    None when estimate-only.
    """

    def __init__(self, schema, binning, config: Config, forest: Forest | Compact | Stack | None, oob: OOB,
                 stats: dict):
        self.schema, self.binning, self.config = schema, binning, config
        self.forest, self.oob, self.stats = forest, oob, stats
        oob.features = list(schema.names)
        self._compact = forest if isinstance(forest, (Compact, Stack)) else None

    @property
    def compact(self) -> Compact | Stack | None:
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

    def _trees(self, members) -> Compact | Stack:
        """The kept members to score with: all, or the first `members` (as a run of that many)."""
        if self.forest is None or self.forest.members == 0:
            raise BaggrError("this ensemble was trained estimate-only (keep_members=False): "
                             "it has no trees to score new rows")
        if members is None:
            return self.compact
        if isinstance(members, bool) or not isinstance(members, (int, np.integer)) \
                or not 1 <= members <= self.forest.members:
            raise BaggrError(f"members must be a whole number from 1 to {self.forest.members} "
                             f"(the members this ensemble keeps), got {members!r}")
        return self.compact.head(int(members))

    def _scores(self, X, trees: Compact | Stack, threads: int | None) -> np.ndarray:
        if isinstance(X, (str, bytes)) or hasattr(X, "__fspath__"):
            X = data.read_table(X)
        codes = data.encode(X, self.schema, self.binning)
        return score(codes, trees, threads=threads)

    def vote_shares(self, X, threads: int | None = None, members: int | None = None) -> np.ndarray:
        """(n, C) share of the members' votes for each class (hard votes, or mean leaf shares).
        threads: None uses every core; the figures are the same for any number. members: score
        with the first that many members only, as a run of that size would."""
        if self.task != "classes":
            raise BaggrError("vote shares are for classes; this ensemble does regression (use predict)")
        trees = self._trees(members)
        return self._scores(X, trees, threads) / trees.members

    def predict(self, X, threads: int | None = None, members: int | None = None) -> np.ndarray:
        """Class labels (ties to the first class in label order) or regression means for new rows.
        threads: None uses every core; the figures are the same for any number. members: score
        with the first that many members only, as a run of that size would."""
        trees = self._trees(members)
        s = self._scores(X, trees, threads)
        if self.task == "classes":
            return np.array(self.classes, dtype=object)[np.argmax(s, axis=1)]
        return s[:, 0] / trees.members

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
