"""The tree kernel of another commit against this worktree's, in one process: identical trees, and
the time per tree paired tree by tree.

    python bench/kernel_ab.py [--old REV] [--new REV] [--trees N] [--processes K] [--skip-identity]
                              [--skip-timing] [--write-reference]

REV (default HEAD, the committed kernel) is any git revision: its `baggr` package is copied out of
git as `baggr_old` (imports rewritten; flat or package layout) under /tmp, so both load side by
side. A numba cache beside that copy makes later runs against the same revision start warm.

Identity: the same table, draws and random state go to both learners, and every node array, the
visits and the out-of-bag outputs (rows, ints, values) must be equal to the last bit, over R1
(twonorm 100,000 x 20, 4 features per split, full trees, Gini), R1 with entropy, with min_leaf 5,
with a depth limit, with categorical features and missing codes (two and three classes, both
criteria), a balanced draw, estimate-only trees and "leaf" votes, and R3 (Friedman #1 100,000 x 10)
with its variants.

Timing: R1 and R3 as bench/speed.py sets them up; trees grown one by one through Learner.grow with
reused working arrays (as the engine does), old and new alternately (old first on even trees, new
first on odd ones), gc frozen, each tree timed in thread CPU time (time spent waiting for a core on
a loaded machine does not count). Prints the median of the per-tree ratios new/old with its quartiles
and a 95% interval of the median from the order statistics (below 1: new is faster).
"""
from __future__ import annotations

import argparse
import dataclasses
import gc
import importlib
import json
import os
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
REFERENCE = ROOT / "tests" / "data" / "tree_digests.json"
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

from generators import friedman1, twonorm, waveform  # noqa: E402
from baggr.config import Config  # noqa: E402
from baggr.data.prepared import prepare  # noqa: E402
from baggr.learn.draw import Drawer  # noqa: E402
from baggr.learn.rng import STREAM_TREE, stream_state  # noqa: E402
from baggr.learn.tree import Learner  # noqa: E402


def old_package(rev: str, alias: str = "baggr_old"):
    """The Learner class of revision rev's baggr, imported as `alias` (copied out once per commit)."""
    commit = subprocess.run(["git", "rev-parse", rev], cwd=ROOT, capture_output=True, text=True,
                            check=True).stdout.strip()
    home = Path(tempfile.gettempdir()) / "baggr_kernel_ab" / f"{commit[:12]}-{alias}"
    pkg = home / alias
    if not pkg.exists():
        home.parent.mkdir(parents=True, exist_ok=True)
        tmp = Path(tempfile.mkdtemp(dir=home.parent))
        tar = subprocess.run(["git", "archive", commit, "baggr"], cwd=ROOT, capture_output=True, check=True).stdout
        subprocess.run(["tar", "-x", "-C", str(tmp)], input=tar, check=True)
        for f in (tmp / "baggr").rglob("*.py"):
            text = f.read_text()
            text = re.sub(r"(?m)^(\s*)(from|import) baggr\b", rf"\1\2 {alias}", text)
            text = re.sub(r"""(["'])baggr\.""", rf"\1{alias}.", text)
            f.write_text(text)
        home.mkdir(parents=True, exist_ok=True)
        (tmp / "baggr").rename(pkg)
    sys.path.insert(0, str(home))
    for name in (f"{alias}.learn.tree", f"{alias}.tree"):
        try:
            return importlib.import_module(name).Learner, commit
        except ModuleNotFoundError:
            continue
    raise SystemExit(f"no tree learner found in {rev}")


@dataclasses.dataclass
class Case:
    name: str
    codes: np.ndarray
    n_bins: np.ndarray
    is_cat: np.ndarray
    y_class: np.ndarray
    y_value: np.ndarray
    task: str
    n_classes: int
    criterion: str
    features_per_split: int
    min_leaf: int = 1
    depth_limit: int | None = None
    draw: str = "bootstrap"
    keep: bool = True
    oob: str = "class"
    exact_below: int = 48
    trees: int = 3

    def learners(self, OldLearner, NewLearner=Learner):
        kw = dict(task=self.task, n_classes=self.n_classes, criterion=self.criterion,
                  features_per_split=self.features_per_split, min_leaf=self.min_leaf,
                  depth_limit=self.depth_limit, exact_below=self.exact_below)
        args = (self.codes, self.n_bins, self.is_cat, self.y_class, self.y_value)
        return OldLearner.make(*args, **kw), NewLearner.make(*args, **kw)

    def drawer(self):
        return Drawer(self.draw, self.codes.shape[1], 1, y_class=self.y_class if self.task == "classes" else None)


def table(X, y, task):
    """Codes, bins, kinds and targets as the engine prepares them."""
    prep = prepare(X, y, Config(task=task))
    b = prep.binning
    return (np.ascontiguousarray(prep.codes), b.n_bins.astype(np.int32), b.is_cat.astype(np.uint8),
            prep.y_class, prep.y_value, max(1, prep.n_classes))


def with_levels(codes, n_bins, is_cat, features, levels=16, missing=0.05, seed=3):
    """A copy with some features turned into categorical ones (code // (256 / levels)) and a share
    of missing codes (255) in every feature: the categorical and missing paths of the split search."""
    codes, n_bins, is_cat = codes.copy(), n_bins.copy(), is_cat.copy()
    rng = np.random.default_rng(seed)
    for f in features:
        codes[f] = codes[f] // (256 // levels)
        n_bins[f] = levels
        is_cat[f] = 1
    codes[rng.random(codes.shape) < missing] = 255
    return codes, n_bins, is_cat


def r1():
    X, y = twonorm(100_000, seed=1)
    return table(X, y, "classes")


def r3():
    X, y = friedman1(100_000, seed=1)
    return table(X, y, "regression")


def identity_cases():
    codes, n_bins, is_cat, yc, yv, k = r1()
    base = dict(codes=codes, n_bins=n_bins, is_cat=is_cat, y_class=yc, y_value=yv, task="classes",
                n_classes=k, criterion="gini", features_per_split=4)
    yield Case("R1 gini", **base, trees=6)
    yield Case("R1 entropy", **{**base, "criterion": "entropy"})
    yield Case("R1 min_leaf 5", **base, min_leaf=5)
    yield Case("R1 depth_limit 8", **base, depth_limit=8)
    yield Case("R1 estimate-only, value votes", **base, keep=False, oob="value")
    yield Case("R1 leaf votes", **base, oob="leaf")
    c2, b2, k2 = with_levels(codes, n_bins, is_cat, [0, 5, 11])
    cat = {**base, "codes": c2, "n_bins": b2, "is_cat": k2}
    yield Case("R1 categorical + missing, gini", **cat)
    yield Case("R1 categorical + missing, entropy, min_leaf 3", **{**cat, "criterion": "entropy"}, min_leaf=3)
    # balanced draw on two unequal classes: drop most of class 1
    keep_rows = np.flatnonzero((yc == 0) | (np.arange(yc.shape[0]) % 4 == 0))
    yield Case("R1 (class 1 thinned) balanced draw", **{**base, "codes": np.ascontiguousarray(codes[:, keep_rows]),
                                                      "y_class": yc[keep_rows]}, draw="balanced")
    yield Case("R1 subsample draw, exact path off", **base, draw="subsample", exact_below=0)
    X, y = waveform(30_000, seed=2)
    wc, wb, wk, wy, wv, wn = table(X, y, "classes")
    wc, wb, wk = with_levels(wc, wb, wk, [3, 10, 17], levels=12)
    wave = dict(codes=wc, n_bins=wb, is_cat=wk, y_class=wy, y_value=wv, task="classes", n_classes=wn,
                features_per_split=4)
    yield Case("waveform 3 classes, categorical + missing, gini", **wave, criterion="gini")
    yield Case("waveform 3 classes, categorical + missing, entropy, depth 10", **wave, criterion="entropy",
               depth_limit=10)
    yield Case("waveform 3 classes, balanced draw, value votes", **wave, criterion="gini", draw="balanced",
               oob="value")
    codes, n_bins, is_cat, yc, yv, _ = r3()
    reg = dict(codes=codes, n_bins=n_bins, is_cat=is_cat, y_class=yc, y_value=yv, task="regression",
               n_classes=1, criterion="variance", features_per_split=3, oob="value")
    yield Case("R3", **reg, trees=6)
    yield Case("R3 min_leaf 5", **reg, min_leaf=5)
    yield Case("R3 depth_limit 10", **reg, depth_limit=10)
    yield Case("R3 estimate-only", **reg, keep=False)
    c3, b3, k3 = with_levels(codes, n_bins, is_cat, [0, 3, 7])
    yield Case("R3 categorical + missing", **{**reg, "codes": c3, "n_bins": b3, "is_cat": k3})
    yield Case("R3 subsample draw, exact path everywhere", **reg, draw="subsample", exact_below=10 ** 6)


def outputs(g):
    """Every array a grown tree hands back, by name."""
    out = {"oob_rows": g.oob_rows, "oob_int": g.oob_int, "oob_value": g.oob_value,
           "visits": np.array([g.visits]), "n_nodes": np.array([g.n_nodes])}
    if g.tree is not None:
        for f in dataclasses.fields(g.tree):
            out[f.name] = np.asarray(getattr(g.tree, f.name))
    return out


def differences(a, b):
    """Names of the outputs that differ (dtype, shape or any bit)."""
    oa, ob = outputs(a), outputs(b)
    bad = sorted(set(oa) ^ set(ob))
    for k in sorted(set(oa) & set(ob)):
        x, y = oa[k], ob[k]
        if x.dtype != y.dtype or x.shape != y.shape or x.tobytes() != y.tobytes():
            bad.append(k)
    return bad


def grow_pair(case, old, new, s_old, s_new, m):
    """Member m's tree from both learners, each on its own working arrays."""
    drawer = case.drawer()
    out = []
    for learner, s in ((old, s_old), (new, s_new)):
        w = drawer.counts_into(m, s.weights)
        out.append(learner.grow(w, stream_state(1, m, STREAM_TREE), keep=case.keep, oob=case.oob, scratch=s))
    return out


def check_identity(OldLearner, NewLearner):
    print("identity (every node array, visits, out-of-bag rows and outputs):")
    failed = 0
    for case in identity_cases():
        old, new = case.learners(OldLearner, NewLearner)
        s_old, s_new = old.scratch(keep=case.keep), new.scratch(keep=case.keep)
        nodes, bad = 0, []
        for m in range(case.trees):
            a, b = grow_pair(case, old, new, s_old, s_new, m)
            nodes += b.n_nodes
            diff = differences(a, b)
            if diff:
                bad.append((m, diff))
        failed += bool(bad)
        verdict = "identical" if not bad else f"DIFFERENT: {bad}"
        print(f"  {case.name}: {case.trees} trees, {nodes / case.trees:,.0f} nodes a tree: {verdict}")
    return failed


def paired(name, case, OldLearner, NewLearner, trees, quiet=False):
    """Per-tree times of both kernels, alternating; returns the ratios new/old."""
    old, new = case.learners(OldLearner, NewLearner)
    s_old, s_new = old.scratch(keep=case.keep), new.scratch(keep=case.keep)
    drawer = case.drawer()
    for m in range(2):  # warm: compile or load, first touch of the working arrays
        grow_pair(case, old, new, s_old, s_new, 1000 + m)
    gc.collect()
    gc.freeze()
    t_old, t_new, same = [], [], 0
    try:
        for m in range(trees):
            order = ((old, s_old, t_old), (new, s_new, t_new))
            if m % 2:
                order = order[::-1]
            got = []
            for learner, s, times in order:
                w = drawer.counts_into(m, s.weights)
                state = stream_state(1, m, STREAM_TREE)
                t0 = time.thread_time()
                g = learner.grow(w, state, keep=case.keep, oob=case.oob, scratch=s)
                times.append(time.thread_time() - t0)
                got.append(g)
            same += not differences(*got)
    finally:
        gc.unfreeze()
    r = np.array(t_new) / np.array(t_old)
    if not quiet:
        describe(f"{name}: {trees} trees, old {np.median(t_old) * 1e3:.1f} ms, new {np.median(t_new) * 1e3:.1f} ms "
                 f"(medians)", r, f"; identical trees {same}/{trees}")
    return r, same


def describe(head, r, tail=""):
    q1, med, q3 = np.percentile(r, [25, 50, 75])
    lo, hi = median_interval(r)
    print(f"  {head}; ratio new/old median {med:.3f} (quartiles {q1:.3f}-{q3:.3f}; 95% interval of the "
          f"median {lo:.3f}-{hi:.3f}){tail}", flush=True)


def median_interval(r, z=1.96):
    """A distribution-free 95% interval of the median: order statistics n/2 -+ z sqrt(n)/2."""
    s = np.sort(r)
    n = len(s)
    k = int(np.floor((n - z * np.sqrt(n)) / 2))
    return s[max(k, 0)], s[min(n - 1 - k, n - 1)]


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--old", default="HEAD", help="git revision of the old kernel (default HEAD)")
    ap.add_argument("--new", default=None, help="git revision of the new kernel (default: this worktree's files; "
                    "--new equal to --old measures the noise)")
    ap.add_argument("--processes", type=int, default=1,
                    help="timing runs, each in a fresh process (code and data placement differ between processes "
                         "and can move a one-process ratio by a few percent)")
    ap.add_argument("--write-reference", action="store_true",
                    help=f"write the old kernel's digests of tests/tree_reference.py's trees to {REFERENCE}")
    ap.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--trees", type=int, default=80, help="paired trees per problem")
    ap.add_argument("--skip-identity", action="store_true")
    ap.add_argument("--skip-timing", action="store_true")
    args = ap.parse_args()
    OldLearner, commit = old_package(args.old)
    NewLearner = Learner if args.new is None else old_package(args.new, "baggr_new")[0]
    if args.write_reference:
        import tree_reference
        ref = {"made by": commit, "cases": tree_reference.digests(OldLearner, stream_state, STREAM_TREE)}
        REFERENCE.write_text(json.dumps(ref, indent=1, sort_keys=True) + "\n")
        print(f"{REFERENCE}: {len(ref['cases'])} cases from {commit[:7]}")
        return
    if args.child:  # one timing run for a parent process: the ratios as JSON
        out = {}
        for name, case in timing_cases():
            r, same = paired(name, case, OldLearner, NewLearner, args.trees, quiet=True)
            out[name] = {"ratios": r.tolist(), "same": same}
        print("RESULT " + json.dumps(out))
        return
    head = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=ROOT, capture_output=True,
                          text=True).stdout.strip()
    dirty = subprocess.run(["git", "status", "--porcelain", "baggr"], cwd=ROOT, capture_output=True,
                           text=True).stdout.strip()
    new = f"{args.new}" if args.new else f"{head}{' + uncommitted changes' if dirty else ''}"
    print(f"{time.strftime('%Y-%m-%d %H:%M')}: old {commit[:7]} ({args.old}) against new {new}; "
          f"load average {os.getloadavg()[0]:.2f}")
    t0 = time.perf_counter()
    failed = 0 if args.skip_identity else check_identity(OldLearner, NewLearner)
    if not args.skip_identity:
        print(f"  ({time.perf_counter() - t0:.0f} s, compile included)")
    if not args.skip_timing and args.processes <= 1:
        print("paired time per tree (Learner.grow, reused working arrays, gc frozen, thread CPU time):")
        for name, case in timing_cases():
            paired(name, case, OldLearner, NewLearner, args.trees)
    elif not args.skip_timing:
        print(f"paired time per tree (Learner.grow, reused working arrays, gc frozen, thread CPU time), "
              f"{args.processes} processes of {args.trees} trees:")
        pooled = {}
        cmd = [sys.executable, os.path.abspath(__file__), "--old", args.old, "--trees", str(args.trees), "--child"]
        cmd += ["--new", args.new] if args.new else []
        for i in range(args.processes):
            run = subprocess.run(cmd, capture_output=True, text=True, check=True)
            got = json.loads(run.stdout.split("RESULT ", 1)[1])
            for name, res in got.items():
                pooled.setdefault(name, []).append(res)
            print(f"    process {i + 1}: " + ", ".join(f"{name} {np.median(res['ratios']):.3f}"
                                                         for name, res in got.items()), flush=True)
        for name, runs in pooled.items():
            r = np.concatenate([res["ratios"] for res in runs])
            meds = sorted(float(np.median(res["ratios"])) for res in runs)
            same = sum(res["same"] for res in runs)
            describe(f"{name}: {len(r)} trees pooled", r,
                     f"; process medians {meds[0]:.3f}-{meds[-1]:.3f}, median of them {np.median(meds):.3f}; "
                     f"identical trees {same}/{len(r)}")
    sys.exit(1 if failed else 0)


def timing_cases():
    """R1 and R3 as bench/speed.py runs them."""
    codes, n_bins, is_cat, yc, yv, k = r1()
    yield "R1", Case("R1", codes, n_bins, is_cat, yc, yv, "classes", k, "gini", 4)
    codes, n_bins, is_cat, yc, yv, _ = r3()
    yield "R3", Case("R3", codes, n_bins, is_cat, yc, yv, "regression", 1, "variance", 3, oob="value")


if __name__ == "__main__":
    main()
