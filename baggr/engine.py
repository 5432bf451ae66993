"""The training loop: members grown in parallel threads, folded into the OOB tallies in member order."""
from __future__ import annotations

import collections
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass

import numpy as np

from baggr import data
from baggr.model.arena import Arena
from baggr.config import Config
from baggr.learn.draw import Drawer
from baggr.errors import ConfigError, DataError
from baggr.events import MemberEvent
from baggr.model.forest import Forest
from baggr.learn.rng import STREAM_TREE, stream_state
from baggr.oob.tally import MemberDelta, Tally
from baggr.learn.tree import Learner, Scratch, Tree


@dataclass
class Prepared:
    """A training table turned into what the kernels take."""

    schema: "data.Schema"
    binning: "data.Binning"
    codes: np.ndarray      # uint8 (p, n), feature-major
    y_class: np.ndarray    # int32 (n,) or a dummy
    y_value: np.ndarray    # float64 (n,) or a dummy
    task: str

    @property
    def n_rows(self) -> int:
        return self.codes.shape[1]

    @property
    def n_classes(self) -> int:
        return len(self.schema.classes)


def prepare(X, y, config: Config, target: str | None = None) -> Prepared:
    """Schema, binning and codes for a training table (the binning never looks at the target)."""
    try:
        n_target = len(y)
    except TypeError:
        raise DataError("the target must be a column of values (an array, list or Arrow array)") from None
    if n_target < 2:
        raise DataError(f"the table has {n_target} row(s); bagging needs at least 2")
    X = data.read_table(X)  # once: a path is read, a dict converted, a numpy array only wrapped
    schema, targets = data.fit_schema(X, y, task=config.task, target=target)
    binning = data.fit_binning(X, schema, bins=config.bins)
    codes = data.encode(X, schema, binning)
    n = codes.shape[1]
    if n < 2:
        raise DataError(f"the table has {n} row(s); bagging needs at least 2")
    if codes.shape[0] == 0:
        raise DataError("the table has no feature columns besides the target")
    if schema.task == "classes":
        y_class, y_value = np.ascontiguousarray(targets, dtype=np.int32), np.zeros(1)
    else:
        y_class, y_value = np.zeros(1, np.int32), np.ascontiguousarray(targets, dtype=np.float64)
    return Prepared(schema, binning, codes, y_class, y_value, schema.task)


EXTRA_MEMBER_ROWS = 1 << 19


def _trim_heap() -> None:
    """Hand memory freed by the C heap back to the system (glibc keeps the freed temporaries of
    binning, tens of MiB on large tables, resident otherwise); a no-op where that is unavailable."""
    global _malloc_trim
    if _malloc_trim is None:
        try:
            import ctypes
            _malloc_trim = ctypes.CDLL(None).malloc_trim
        except (OSError, AttributeError):
            _malloc_trim = False
    if _malloc_trim:
        _malloc_trim(0)


_malloc_trim = None


@dataclass
class MemberResult:
    """One grown member: its tree (None in estimate-only runs) and its OOB delta."""

    member: int
    tree: Tree | None
    delta: MemberDelta
    visits: int
    nodes: int
    seconds: float


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
        return self.learner.scratch(keep=self.config.keep_members)

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
            g = self.learner.grow(w, stream_state(cfg.seed, m, STREAM_TREE), keep=cfg.keep_members,
                                  oob=self.oob, scratch=s)
        finally:
            with self._lock:
                self._spare.append(s)
        if self.oob == "class":
            votes = g.oob_int
        elif self.prep.task == "classes":
            votes = g.oob_value
        else:
            votes = g.oob_value[:, 0]
        return MemberResult(m, g.tree, MemberDelta(m, g.oob_rows, votes), g.visits, g.n_nodes,
                            time.perf_counter() - t0)

    def grow_chunk(self, members) -> tuple[list, list]:
        """(trees, tally deltas) of a range of members: the seam where other backends plug in."""
        results = [self.grow_member(m) for m in members]
        return [r.tree for r in results], [r.delta for r in results]


class Training:
    """A run in progress: grows members from `next_member` on, folding each into the tallies."""

    def __init__(self, X, y, config: Config, *, prepared: Prepared | None = None, target: str | None = None):
        if not isinstance(config, Config):
            raise ConfigError("config must be a baggr.Config")
        self.config = config
        self.prep = prepared or prepare(X, y, config, target=target)
        self.grower = Grower(self.prep, config)
        self.tally = Tally(self.prep.task, self.prep.y_class if self.prep.task == "classes" else self.prep.y_value,
                           max(1, self.prep.n_classes), config.vote, capacity=config.members)
        # kept trees, in member order: views into the arena, where each is copied once as it is folded
        self.trees: list = []
        self._arena = self._new_arena()
        self.elapsed = 0.0
        self.stats = {"visits": 0, "nodes": 0, "grow_seconds": 0.0, "fold_seconds": 0.0,
                      "keep_seconds": 0.0, "members": 0}

    @property
    def next_member(self) -> int:
        return self.tally.members

    def run(self, on_member=None, should_stop=None, until: int | None = None):
        """Grow members until `until` (default config.members) or should_stop() is true; returns the Ensemble."""
        target = self.config.members if until is None else until
        threads = self.config.resolved_threads()
        start, t_run = self.next_member, time.perf_counter()
        elapsed0 = self.elapsed
        recent = collections.deque(maxlen=20)
        _trim_heap()
        # one member more than threads in flight: a worker that finishes starts the next at once,
        # while this thread folds (in member order) the one before; not on large tables, where the
        # fold is a small part of a member and each waiting delta holds 8 bytes per OOB row
        extra = 1 if self.prep.n_rows <= EXTRA_MEMBER_ROWS else 0
        pool = ThreadPoolExecutor(max_workers=threads, thread_name_prefix="baggr-member")
        inflight = collections.deque()
        nxt = start
        try:
            while self.next_member < target:
                while nxt < target and len(inflight) < threads + extra:
                    inflight.append(pool.submit(self.grower.grow_member, nxt))
                    nxt += 1
                result = inflight.popleft().result()
                t0 = time.perf_counter()
                self.tally.fold(result.delta)
                t1 = time.perf_counter()
                self.stats["fold_seconds"] += t1 - t0
                if result.tree is not None:
                    self.trees.append(self._keep(result.tree))
                    self.stats["keep_seconds"] += time.perf_counter() - t1
                self.stats["grow_seconds"] += result.seconds
                self.stats["visits"] += result.visits
                self.stats["nodes"] += result.nodes
                self.stats["members"] = self.next_member
                now = time.perf_counter()
                self.elapsed = elapsed0 + (now - t_run)
                recent.append(now)
                oob_rows = result.delta.rows.shape[0]
                result = None  # folded: its delta need not live on while the next one is awaited
                if on_member is not None:
                    on_member(self.event(oob_rows, recent))
                if should_stop is not None and should_stop():
                    break
        finally:
            for f in inflight:
                f.cancel()
            pool.shutdown(wait=True, cancel_futures=True)
            self.grower.release()
            _trim_heap()
        return self.ensemble()

    def event(self, oob_rows: int, recent=()) -> MemberEvent:
        t = self.tally
        rate = (len(recent) - 1) / (recent[-1] - recent[0]) if len(recent) > 1 and recent[-1] > recent[0] else 0.0
        ev = MemberEvent(member=t.members, members_target=self.config.members, elapsed=self.elapsed,
                         error=t.error(), interval=t.interval(), coverage=t.coverage, oob_rows=oob_rows, rate=rate)
        if t.task == "classes":
            ev.class_error = t.class_error().tolist()
            ev.confusion = t.confusion.tolist()
        else:
            ev.r2 = t.r2()
        return ev

    @property
    def n_out(self) -> int:
        """Values a node stores: one per class, or one for regression."""
        return max(1, self.prep.n_classes) if self.prep.task == "classes" else 1

    def _new_arena(self) -> Arena | None:
        """Room for every node the configured members could have (address space only)."""
        if not self.config.keep_members:
            return None
        n = max(self.prep.n_rows, 1)
        any_cat = bool(np.any(self.prep.binning.is_cat))
        return Arena.reserve(self.config.members * (2 * n - 1), self.config.members * (n - 1) if any_cat else 0,
                             self.n_out)

    def _keep(self, tree):
        """The tree to keep: copied into the arena where it fits (else kept as it is)."""
        if self._arena is not None and self._arena.room(tree):
            return self._arena.append(tree)
        self._arena = None  # from here on, the trees are packed when an ensemble is made
        return tree

    def forest(self) -> Forest | None:
        """The kept trees as a Forest: views of the arena, or (without one) packed now, a copy."""
        if not self.config.keep_members:
            return None
        if self._arena is not None:
            return self._arena.forest()
        return Forest.pack(self.trees, self.n_out)

    def ensemble(self):
        from baggr.model.ensemble import Ensemble
        return Ensemble.from_training(self)

    # -- checkpoints -----------------------------------------------------------------------------
    def checkpoint(self) -> tuple[dict, dict]:
        """(tally arrays, header fields) that let a later process continue this run bit for bit.

        Kept trees are not included: the caller stores them once each (e.g. in append-only chunk
        files via Forest.pack(training.trees[a:b])), so a checkpoint costs O(rows), not O(trees).
        """
        arrays = {"tally_" + k: v for k, v in self.tally.arrays().items()}
        header = {"next_member": self.next_member, "elapsed": self.elapsed,
                  "stats": {k: float(v) for k, v in self.stats.items()}}
        return arrays, header

    def restore(self, arrays: dict, header: dict, trees: list | None = None) -> None:
        """Continue from checkpoint() output for the same data and config; trees: the kept members 0..m-1."""
        from baggr.errors import ModelFileError
        tally = {k[6:]: v for k, v in arrays.items() if k.startswith("tally_")}
        for name, a in self.tally.arrays().items():
            b = tally.get(name)
            if b is None or b.dtype != a.dtype or b.shape[1:] != a.shape[1:] or \
                    (name not in ("curve", "class_curve", "curve_interval") and b.shape != a.shape):
                raise ModelFileError(f"checkpoint array '{name}' does not fit this run's data")
        m = int(tally["members"][0])
        if m != header.get("next_member") or m > self.config.members or tally["curve"].shape[0] != m:
            raise ModelFileError("checkpoint member count is inconsistent")
        trees = list(trees or [])
        if self.config.keep_members and len(trees) != m:
            raise ModelFileError(f"checkpoint has {m} members but {len(trees)} kept trees")
        self.tally.restore(tally)
        self.trees = []
        self._arena = self._new_arena()
        if self.config.keep_members:
            for t in trees:
                self.trees.append(self._keep(t))
        self.elapsed = float(header.get("elapsed", 0.0))
        for k, v in header.get("stats", {}).items():
            if k in self.stats:
                self.stats[k] = type(self.stats[k])(v)


def train(X, y, config: Config | None = None, on_member=None):
    """Train a bagged tree ensemble and its OOB estimate in one pass; on_member(event) after every member."""
    return Training(X, y, config or Config()).run(on_member=on_member)
