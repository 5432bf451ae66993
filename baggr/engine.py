"""One training: members grown on a backend (local threads by default), folded into the OOB tallies in
member order, an event after each."""
from __future__ import annotations

import collections
import hashlib
import time
import warnings

import numpy as np

from baggr.backends.base import Backend
from baggr.backends.member import Grower
from baggr.backends.threads import Threads
from baggr.data.prepared import Prepared, prepare
from baggr.data.table import read_table
from baggr.model.arena import Arena
from baggr.config import Config
from baggr.errors import ConfigError, DataError, ModelFileError
from baggr.events import MemberEvent
from baggr.model.ensemble import Ensemble
from baggr.model.compact import Compact, kind_for
from baggr.oob.importance import ImportanceTally
from baggr.oob.measure_curve import MeasureCurve
from baggr.oob.view import OOB
from baggr.oob.tally import Tally


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


class Training:
    """A run in progress: grows members from `next_member` on, folding each into the tallies."""

    def __init__(self, X, y, config: Config, *, prepared: Prepared | None = None, target: str | None = None,
                 missing_target: str = "drop"):
        if not isinstance(config, Config):
            raise ConfigError("config must be a baggr.Config")
        self.config = config
        self.prep = prepared or prepare(X, y, config, target=target, missing_target=missing_target)
        measure = config.resolved_measure(self.prep.task)   # a measure that does not fit the target fails here
        self.grower = Grower(self.prep, config)
        self.tally = Tally(self.prep.task, self.prep.y_class if self.prep.task == "classes" else self.prep.y_value,
                           max(1, self.prep.n_classes), config.vote, capacity=config.members)
        self.tally.measure = measure     # refitted beside the error; --stop-when-stable reads its members_needed
        self.measures = MeasureCurve(self.prep.task)   # every measure at log-spaced sizes
        self._measured: dict | None = None
        self.importance = ImportanceTally(self.prep.codes.shape[0], self.prep.n_classes if self.prep.task == "classes"
                                          else 0) if config.importance else None
        # kept trees, in member order, packed into the arena as each member is folded; the trees of
        # members before trees_base were set aside (stored by the caller, see set_aside)
        self.trees_base = 0
        self._arena = self._new_arena()
        self.elapsed = 0.0
        self.stats = {"visits": 0, "nodes": 0, "grow_seconds": 0.0, "fold_seconds": 0.0,
                      "keep_seconds": 0.0, "measure_seconds": 0.0, "members": 0, "missing_target": self.prep.missing_target}
        self.warm_up_seconds = 0.0   # compiling or loading the kernels before the first member (not in elapsed)

    @property
    def next_member(self) -> int:
        return self.tally.members

    def run(self, on_member=None, should_stop=None, until: int | None = None, backend: Backend | None = None):
        """Grow members until `until` (default config.members) or should_stop() is true; returns the
        Ensemble (None once trees were set aside: see set_aside).

        backend: where members grow (default: local threads, config.threads of them).
        """
        target = self.config.members if until is None else until
        self.warm_up()
        backend = backend or Threads(self.config.resolved_threads())
        # the figures between members are only read through on_member (a run's journal)
        self.tally.live_fits = on_member is not None
        start, t_run = self.next_member, time.perf_counter()
        elapsed0 = self.elapsed
        recent = collections.deque(maxlen=20)
        _trim_heap()
        try:
            for result in backend.members(self.grower, start, target):
                t0 = time.perf_counter()
                self.tally.fold(result.delta)
                t1 = time.perf_counter()
                self.stats["fold_seconds"] += t1 - t0
                if self.importance is not None and result.importance is not None:
                    self.importance.fold(result.importance)
                    self.stats["importance_seconds"] = self.stats.get("importance_seconds", 0.0) + \
                        result.importance_seconds
                self._measured = self.measures.after_fold(self.tally)
                self.stats["measure_seconds"] = self.measures.seconds
                t1 = time.perf_counter()
                if result.tree is not None:
                    self._arena.append(result.tree)
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
            backend.close()
            self.grower.release()
            _trim_heap()
        return self.ensemble() if not self.trees_base else None   # trees set aside: the caller makes it

    def event(self, oob_rows: int, recent=()) -> MemberEvent:
        t = self.tally
        rate = (len(recent) - 1) / (recent[-1] - recent[0]) if len(recent) > 1 and recent[-1] > recent[0] else 0.0
        raw_error, raw_interval = t.error(), t.interval()
        live = t.live()
        ev = MemberEvent(member=t.members, members_target=self.config.members, elapsed=self.elapsed,
                         error=live.get("error", raw_error), interval=live.get("interval", raw_interval),
                         coverage=t.coverage, oob_rows=oob_rows, rate=rate, raw_error=raw_error,
                         raw_interval=raw_interval, error_limit=live.get("error_limit", float("nan")),
                         error_limit_interval=live.get("error_limit_interval"),
                         members_needed=live.get("members_needed"))
        if t.task == "classes":
            ev.raw_class_error = t.class_error().tolist()
            ev.class_error = live.get("class_error", ev.raw_class_error)
            ev.confusion = t.confusion.tolist()
        else:
            ev.r2 = t.r2(live.get("error"))   # with the estimated MSE where there is one, as `error`
        if t.est is not None and t.est.members == t.members:
            ev.curve = t.curve_points(self.config.members)
            if t.mest is not None:   # the chosen measure's estimate, refitted beside the error's
                ev.measure_estimate = dict(t.measure_live(),
                                           curve=t.mest.points(t.mest.points_top(self.config.members, t.members)))
        if self._measured is not None:
            ev.measures = self._measured
            if self.importance is not None:
                ev.importance = self.importance.latest()
        return ev

    def warm_up(self) -> float:
        """Grow a member on a few rows of this table first: compiling the kernels (once per machine)
        or loading them (once per process) then stays out of the training figures (elapsed and
        members/s). Once per process and kind of run; returns its seconds (0 when done before)."""
        p, cfg = self.prep, self.config
        y = p.y_class if p.task == "classes" else p.y_value
        key = (p.task, cfg.vote, cfg.resolved_criterion(p.task), cfg.draw, cfg.keep_members,
               bool(np.any(p.binning.is_cat)), min(p.n_classes, 3), p.codes.flags.writeable, y.flags.writeable)
        if key in _WARM:
            return 0.0
        _WARM.add(key)
        t0 = time.perf_counter()
        n = p.n_rows
        if p.task == "classes":   # a few rows of every class, so every class's draw works
            rows = np.unique(np.concatenate([np.arange(min(n, 32))] +
                                            [np.flatnonzero(p.y_class == c)[:4] for c in range(p.n_classes)]))
        else:
            rows = np.arange(min(n, 48))
        # the same dtypes, layouts and read-only flags as the table's own arrays: the same compiled code
        small = Prepared(p.schema, p.binning, _alike(p.codes[:, rows], p.codes),
                         _alike(p.y_class[rows], p.y_class) if p.task == "classes" else p.y_class,
                         _alike(p.y_value[rows], p.y_value) if p.task == "regression" else p.y_value, p.task)
        Training(None, None, cfg.replace(members=2, threads=1), prepared=small).run(backend=Threads(1))
        seconds = time.perf_counter() - t0
        self.warm_up_seconds += seconds
        return seconds

    @property
    def n_out(self) -> int:
        """Values a node stores: one per class, or one for regression."""
        return max(1, self.prep.n_classes) if self.prep.task == "classes" else 1

    @property
    def kind(self) -> str:
        """What the kept trees' leaves hold (compact.kind_for)."""
        return kind_for(self.prep.task, self.config.vote)

    def _new_arena(self) -> Arena | None:
        """Room for every node the configured members could have (address space only)."""
        if not self.config.keep_members:
            return None
        return Arena(self.kind, self.n_out, self.config.members, self.prep.n_rows,
                     bool(np.any(self.prep.binning.is_cat)))

    def kept(self, a: int | None = None, b: int | None = None) -> Compact | None:
        """The kept trees of members a..b-1 (default: all in memory, from trees_base on) as a Compact
        of views into the arena; None when estimate-only."""
        if not self.config.keep_members:
            return None
        a = self.trees_base if a is None else a
        b = self.next_member if b is None else b
        if a < self.trees_base or b > self.trees_base + self._arena.members:
            raise ValueError(f"members {a}..{b - 1} are not in memory (from {self.trees_base} on)")
        return self._arena.compact(a - self.trees_base, b - self.trees_base)

    def set_aside(self, upto: int) -> None:
        """Forget the kept trees of members before `upto`, which the caller has stored (a comparison
        keeps in memory only the trees not yet in the run's trees file, candidate after candidate);
        the later ones move to a fresh arena, so the old one's memory is freed."""
        if not self.config.keep_members or upto <= self.trees_base:
            return
        if upto > self.next_member:
            raise ValueError("cannot set aside trees not grown yet")
        later = self.kept(upto)
        self._arena = self._new_arena()
        self._arena.extend(later)
        self.trees_base = upto

    def take_back(self, earlier) -> None:
        """Take the trees set aside back, in member order; earlier: the trees of members
        0..trees_base-1 (a Compact or a Stack)."""
        if not self.trees_base:
            return
        if earlier.members != self.trees_base:
            raise ValueError(f"{self.trees_base} trees were set aside, {earlier.members} given back")
        later = self.kept()
        self._arena = self._new_arena()
        self._arena.extend(earlier)
        self._arena.extend(later)
        self.trees_base = 0

    def forest(self) -> Compact | None:
        """The kept trees as a Compact of views into the arena (None when estimate-only)."""
        if self.trees_base:
            raise ValueError("trees were set aside: take them back first (take_back)")
        return self.kept()

    def ensemble(self, trees: bool = True) -> Ensemble:
        """The Ensemble of the run so far; trees=False leaves the trees out (the caller has them
        stored, e.g. in the run's trees file) and works with trees set aside."""
        p = self.prep
        stats = dict(self.stats, seconds=self.elapsed)
        oob = OOB.from_tally(self.tally, p.schema.classes, extra={"data_sha256": self.data_sha256()})
        oob.arrays().update(self._oob_extras())
        return Ensemble(p.schema, p.binning, self.config, self.forest() if trees else None, oob, stats)

    def _oob_extras(self) -> dict:
        """Arrays the OOB view carries beside the tallies: the targets (the measures and the per-row
        export judge against them) and the measure curve."""
        y = self.tally.y
        extra = {"target": np.array(y, copy=True), **self.measures.arrays()}
        if self.importance is not None:
            extra.update(self.importance.arrays())
        return extra

    def data_sha256(self) -> np.ndarray:
        """SHA-256 of the binned table and the targets (uint8[32]), kept with the OOB figures: a
        continuation checks it was given the same data."""
        h = hashlib.sha256()
        for a in (self.prep.codes, self.prep.y_class, self.prep.y_value):
            h.update(np.ascontiguousarray(a).data)
        return np.frombuffer(h.digest(), np.uint8).copy()

    @classmethod
    def from_ensemble(cls, ens: Ensemble, X, y, members: int, target: str | None = None,
                      missing_target: str = "drop") -> "Training":
        """A training that continues `ens` (trained on X, y) from its members up to `members`:
        run() then ends bit-identical to a run of `members` members from the start (members are
        pure functions of (data, config, seed, m); the tallies are folded on in member order)."""
        if isinstance(members, bool) or not isinstance(members, int) or members <= ens.members:
            raise ConfigError(f"members must be a whole number above the ensemble's {ens.members}, got {members!r}")
        arrays = ens.oob.arrays()
        if "data_sha256" not in arrays:
            raise ModelFileError("this ensemble does not record the data it was trained on (saved by an older "
                                 "baggr): it cannot be grown; train a new one")
        tr = cls(X, y, ens.config.replace(members=members), target=target, missing_target=missing_target)
        if not np.array_equal(tr.data_sha256(), arrays["data_sha256"]):
            raise DataError("these rows are not the table this ensemble was trained on: growing needs the same data")
        # the tallies (and the run's latest refit) as a checkpoint has them; the rest (targets, measures,
        # importance) beside them, as checkpoint() puts them
        known = set(tr.tally.arrays())
        tally = {("tally_" + k if k in known or k.startswith("est_") else k): v for k, v in arrays.items()
                 if not k.startswith("final_") and k not in ("class_rows", "data_sha256")}
        header = {"next_member": ens.members, "elapsed": float(ens.stats.get("seconds", 0.0)),
                  "stats": {k: v for k, v in ens.stats.items() if k in tr.stats}}
        tr.restore(tally, header, ens.compact if tr.config.keep_members else None)
        return tr

    # -- checkpoints -----------------------------------------------------------------------------
    def checkpoint(self) -> tuple[dict, dict]:
        """(tally arrays, header fields) that let a later process continue this run bit for bit.

        Kept trees are not included: the caller stores them once each (e.g. appended to the run's
        trees file from kept(a, b)), so a checkpoint costs O(rows), not O(trees).
        """
        arrays = {"tally_" + k: v for k, v in self.tally.arrays().items()}
        arrays.update(self._oob_extras())
        header = {"next_member": self.next_member, "elapsed": self.elapsed,
                  "stats": {k: float(v) for k, v in self.stats.items()}}
        return arrays, header

    def restore(self, arrays: dict, header: dict, trees=None) -> None:
        """Continue from checkpoint() output for the same data and config; trees: the kept members
        0..m-1 (a Compact or a Stack, checked)."""
        tally = {k[6:]: v for k, v in arrays.items() if k.startswith("tally_")}
        for name, a in self.tally.arrays().items():
            b = tally.get(name)
            if b is None and name == "value_m2":
                raise ModelFileError("the checkpoint was written by an older baggr (it lacks the spread of the "
                                     "members' predictions the estimated curve needs)")
            if b is None or b.dtype != a.dtype or b.shape[1:] != a.shape[1:] or \
                    (name not in ("curve", "class_curve", "curve_interval") and b.shape != a.shape):
                raise ModelFileError(f"checkpoint array '{name}' does not fit this run's data")
        m = int(tally["members"][0])
        if m != header.get("next_member") or m > self.config.members or tally["curve"].shape[0] != m:
            raise ModelFileError("checkpoint member count is inconsistent")
        n_trees = trees.members if trees is not None else 0
        if self.config.keep_members and n_trees != m:
            raise ModelFileError(f"checkpoint has {m} members but {n_trees} kept trees")
        self.tally.restore(tally)
        bad = self.tally.est.check() if self.tally.est is not None else None
        if bad:
            raise ModelFileError(f"checkpoint's estimated curve is damaged: {bad}")
        self.measures.restore(arrays, m)
        if self.importance is not None:
            if "imp_sum" not in arrays:
                raise ModelFileError("the checkpoint has no importance figures, but the run measures importance")
            self.importance.restore(arrays)
        self.trees_base = 0
        self._arena = self._new_arena()
        if self.config.keep_members:
            self._arena.extend(trees)
        self.elapsed = float(header.get("elapsed", 0.0))
        for k, v in header.get("stats", {}).items():
            if k in self.stats:
                self.stats[k] = type(self.stats[k])(v)


_WARM: set = set()   # kinds of run warmed up in this process (Training.warm_up)


def _alike(part: np.ndarray, whole: np.ndarray) -> np.ndarray:
    """A C-contiguous copy of part, read-only when whole is (numba compiles each flag apart)."""
    out = np.ascontiguousarray(part)
    if not whole.flags.writeable:
        out.flags.writeable = False
    return out


# CPU seconds a first run spends compiling the kernels, on one core of the project's 2-core VM
# (bench/first_run.py, bench/README.md): all of them, or one task's share when the other task's are on disk.
COMPILE_ALL = 15.0
COMPILE_TASK = 9.0


def compile_seconds(task: str | None) -> float:
    """About how long the kernels a training of this task runs take to compile here: 0 when numba's
    cache holds them (a cheap look at its index), else the measured CPU time stretched by the load
    (a busy machine lends the compiler only part of a core)."""
    from baggr import jit
    from baggr.learn.tree_kernels import grow_kernel
    from baggr.oob import tally_kernels as tk
    if not jit.cached(grow_kernel):
        cpu = COMPILE_ALL
    elif task == "regression":
        cpu = 0.0 if jit.cached(tk.fold_regression) else COMPILE_TASK
    else:
        cpu = 0.0 if jit.cached(tk.fold_two_hard) or jit.cached(tk.fold_classes) else COMPILE_TASK
    if cpu:
        import os
        try:
            busy = os.getloadavg()[0] / (os.cpu_count() or 1)
        except OSError:
            busy = 1.0
        cpu *= min(4.0, max(1.0, busy))
    return cpu


def train(X, y, config: Config | None = None, on_member=None, *, drop=None, only=None,
          missing_target: str = "drop", cluster=None) -> Ensemble:
    """Train a bagged tree ensemble and its OOB estimate in one pass; on_member(event) after every member.

    drop / only: column names of X to leave out / to keep (the command's --drop and --only).
    missing_target: "drop" (the default) leaves out rows whose target is missing, with a warning
    giving their count (also in ensemble.stats["missing_target"]); "refuse" raises a DataError.
    cluster: grow the members on a Dask cluster (needs baggr[cluster]): a distributed.Client, a
    scheduler address ("tcp://host:8786", "tls://host:8786") or "local:N" (N worker processes on this
    machine, stopped at the end). The result is the same, bit for bit, as with local threads.
    """
    backend = None
    if cluster is not None:
        from baggr.backends.dask import Dask
        backend = Dask(cluster)     # connected first: a wrong address fails before the data is read
    try:
        if drop or only:
            X = read_table(X, drop=drop, only=only)
        tr = Training(X, y, config or Config(), missing_target=missing_target)
        if tr.prep.missing_target:
            warnings.warn(missing_target_text(tr.prep.missing_target, tr.prep.n_rows), stacklevel=2)
        return tr.run(on_member=on_member, backend=backend)
    finally:
        if backend is not None:
            backend.shutdown()


def missing_target_text(missing: int, rows: int, target: str | None = None) -> str:
    """The one line that says how many rows were left out for a missing target."""
    what = f"target {target!r}" if target else "target"
    return f"left out {missing} of {missing + rows} rows whose {what} is missing"


def grow(ens: Ensemble, X, y, members: int, on_member=None) -> Ensemble:
    """`ens` grown to `members` members on the table it was trained on (X, y): the same ensemble,
    bit for bit, as one trained with that many members from the start."""
    return Training.from_ensemble(ens, X, y, members).run(on_member=on_member)
