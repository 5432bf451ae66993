"""The member function every backend runs: member m from (binned data, config, seed, m) alone."""
from __future__ import annotations

import threading
import time
from dataclasses import dataclass

import numpy as np

from baggr.config import Config
from baggr.data.prepared import Prepared
from baggr.learn.draw import Drawer
from baggr.learn.rng import STREAM_TREE, stream_state
from baggr.learn.tree import Learner, Scratch, Tree
from baggr.oob.importance import MemberImportance, member_importance
from baggr.oob.tally import MemberDelta


@dataclass
class MemberResult:
    """One grown member: its tree (None in estimate-only runs) and its OOB delta."""

    member: int
    tree: Tree | None
    delta: MemberDelta
    visits: int
    nodes: int
    seconds: float
    importance: MemberImportance | None = None   # with config.importance
    importance_seconds: float = 0.0


class Grower:
    """Grows any member m from (binned data, config, seed, m) alone: a pure function of m."""

    def __init__(self, prep: Prepared, config: Config):
        self.prep, self.config = prep, config
        self.criterion = config.resolved_criterion(prep.task)
        self.k = config.resolved_features(prep.codes.shape[0], prep.task)
        self.n_bins = prep.binning.n_bins.astype(np.int32)
        self.is_cat = prep.binning.is_cat.astype(np.uint8)
        self.drawer = Drawer(config.draw, prep.n_rows, config.seed, fraction=config.draw_fraction,
                             y_class=prep.y_class if prep.task == "classes" else None)
        self.learner = Learner.make(prep.codes, self.n_bins, self.is_cat, prep.y_class, prep.y_value,
                                    task=prep.task, n_classes=max(1, prep.n_classes), criterion=self.criterion,
                                    features_per_split=self.k, min_leaf=config.min_leaf,
                                    depth_limit=config.depth_limit)
        # what each OOB row gets from its leaf: a class index (hard votes), class shares, or a value
        self.oob = "class" if prep.task == "classes" and config.vote == "hard" else "value"
        # one set of working arrays per thread, reused member after member (no page faults, no zeroing)
        self._spare: list[Scratch] = []
        self._lock = threading.Lock()

    def _scratch(self) -> Scratch:
        with self._lock:
            if self._spare:
                return self._spare.pop()
        return self.learner.scratch(keep=self._tree_needed)

    @property
    def _tree_needed(self) -> bool:
        """The tree is built in full when it is kept, or (only for the time of the member) for its importance."""
        return self.config.keep_members or self.config.importance

    def release(self) -> None:
        """Drop the working arrays (a finished run keeps no per-thread memory)."""
        with self._lock:
            self._spare.clear()

    def grow_member(self, m: int) -> MemberResult:
        t0 = time.perf_counter()
        cfg = self.config
        s = self._scratch()
        try:
            w = self.drawer.counts_into(m, s.weights)
            g = self.learner.grow(w, stream_state(cfg.seed, m, STREAM_TREE), keep=self._tree_needed,
                                  oob=self.oob, scratch=s)
            imp, t_imp = None, 0.0
            if cfg.importance:
                t1 = time.perf_counter()
                p = self.prep
                imp = member_importance(p.codes, g.tree, g.oob_rows, self.learner.y_class, self.learner.y_value,
                                        p.task == "regression", max(1, p.n_classes), cfg.seed, m)
                t_imp = time.perf_counter() - t1
        finally:
            with self._lock:
                self._spare.append(s)
        tree = g.tree if cfg.keep_members else None
        if self.oob == "class":
            votes = g.oob_int
        elif self.prep.task == "classes":
            votes = g.oob_value
        else:
            votes = g.oob_value[:, 0]
        return MemberResult(m, tree, MemberDelta(m, g.oob_rows, votes), g.visits, g.n_nodes,
                            time.perf_counter() - t0 - t_imp, imp, t_imp)

    def grow_chunk(self, members) -> list[MemberResult]:
        """The members of a range, in order: the unit a backend ships (trees and OOB deltas)."""
        return [self.grow_member(m) for m in members]
