"""The driver's work per member on R1 (twonorm 100,000 x 20), this worktree against another revision,
alternating in one process.

The driver (main thread) does after each member: the tally fold, the measure points at their
scheduled sizes, the refits of the estimate (members 32, 64, 128, ...), the member event (the
estimate read at the current size) and the journal line; at the end the final fit over all rows.

1. Replay: `members` R1 members grown once (threads=2), then handed to Training.run as fast as it
   takes them, with a listener writing the journal line as a run does: the driver alone. Per
   round, old and new alternate (old first on even rounds); estimate-only and kept. Prints, best
   of `rounds`, CPU ms per member and members/s of driver throughput, with the loop split into
   fold, measure points, refits, journal line (event fields, JSON, write) and the rest (the event,
   the keep, the loop), and the final fit apart; and whether old and new wrote the same journal
   figures and the same model arrays.
2. Real runs (unless --no-runs): `run_members` members at threads=1 and 2, old and new alternating,
   the driver's perf_counter time per member (fold + measures + keep + event + journal line, the
   work on the main thread between members).
    python bench/fold_cost.py [--old REV] [--members N] [--rounds R] [--run-members N] [--no-runs]
"""
import argparse
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
sys.path.insert(0, str(ROOT))
from util import twonorm  # noqa: E402
import baggr  # noqa: E402


def old_package(rev: str, alias: str = "baggr_old"):
    """Revision rev's baggr imported as `alias` (copied out of git once per commit)."""
    commit = subprocess.run(["git", "rev-parse", rev], cwd=ROOT, capture_output=True, text=True,
                            check=True).stdout.strip()
    home = Path(tempfile.gettempdir()) / "baggr_fold_cost" / f"{commit[:12]}-{alias}"
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
    return importlib.import_module(alias), commit


class Side:
    """One package's training, journal writer and config class."""

    def __init__(self, pkg, name):
        self.name = name
        self.Config = pkg.Config
        self.engine = importlib.import_module(pkg.__name__ + ".engine")
        self.Writer = importlib.import_module(pkg.__name__ + ".runs.journal_writer").JournalWriter


class Replay:
    """Hands back members grown beforehand (duck-typed as a backend)."""

    def __init__(self, results):
        self.results = results

    def members(self, grower, start, stop):
        yield from self.results[start:stop]

    def close(self):
        pass


def replay(side, X, y, cfg_kw, results, path):
    """(CPU seconds of the run, parts {name: seconds}, journal figures, model arrays)."""
    tr = side.engine.Training(X, y, side.Config(**cfg_kw))
    jw = side.Writer(path)
    parts = {"journal": 0.0}
    end = [0.0]

    def on_member(ev):
        t0 = time.perf_counter()
        jw.write("member", **ev.journal_fields())
        t1 = time.perf_counter()
        parts["journal"] += t1 - t0
        end[0] = t1

    c0, t0 = time.process_time(), time.perf_counter()
    ens = tr.run(backend=Replay(results), on_member=on_member)
    cpu, t_end = time.process_time() - c0, time.perf_counter()
    jw.close()
    loop = end[0] - t0
    parts.update(fold=tr.stats["fold_seconds"], measures=tr.stats["measure_seconds"],
                 refits=tr.tally.refit_seconds, final=t_end - end[0])
    parts["rest"] = loop - parts["journal"] - parts["fold"] - parts["measures"]
    figures = []
    for line in Path(path).read_text().splitlines():
        d = json.loads(line)
        for k in ("t", "elapsed", "rate"):
            d.pop(k, None)
        figures.append(d)
    arrays = ens.oob.arrays()
    return cpu, parts, figures, {k: np.asarray(v) for k, v in arrays.items()}


def same_arrays(a, b):
    return a.keys() == b.keys() and all(a[k].dtype == b[k].dtype and a[k].tobytes() == b[k].tobytes() for k in a)


def real_run(side, X, y, cfg_kw, path):
    """Driver seconds per member of a real run: fold + measures + keep + event + journal line."""
    tr = side.engine.Training(X, y, side.Config(**cfg_kw))
    jw = side.Writer(path)
    acc = {"between": 0.0}
    last = [None]
    orig_fold = tr.tally.fold

    def fold(delta):              # the main thread's work from the fold to the end of the listener
        last[0] = time.perf_counter()
        orig_fold(delta)

    tr.tally.fold = fold

    def on_member(ev):
        jw.write("member", **ev.journal_fields())
        acc["between"] += time.perf_counter() - last[0]

    t0 = time.perf_counter()
    tr.run(on_member=on_member)
    wall = time.perf_counter() - t0
    jw.close()
    return acc["between"] / cfg_kw["members"], wall


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--old", default="main")
    ap.add_argument("--members", type=int, default=256)
    ap.add_argument("--rounds", type=int, default=5)
    ap.add_argument("--run-members", type=int, default=128)
    ap.add_argument("--no-runs", action="store_true")
    a = ap.parse_args()
    old_pkg, commit = old_package(a.old)
    sides = [Side(old_pkg, "old"), Side(baggr, "new")]
    head = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=ROOT, capture_output=True, text=True).stdout
    print(f"old {a.old} = {commit[:9]}, new = worktree at {head.strip()}; load {os.getloadavg()[0]:.2f}", flush=True)
    X, y = twonorm(100_000, seed=1)
    kw = dict(features_per_split=4, seed=1)
    tr = sides[1].engine.Training(X, y, baggr.Config(members=a.members, threads=2, **kw))
    t0 = time.perf_counter()
    kept = tr.grower.grow_chunk(range(a.members))
    tr.grower.release()
    print(f"grew {a.members} members in {time.perf_counter() - t0:.1f} s", flush=True)
    bare = [type(r)(r.member, None, r.delta, r.visits, r.nodes, r.seconds) for r in kept]
    tmp = Path(tempfile.mkdtemp())
    for s in sides:    # load the kernels, fill caches
        for keep, res in ((False, bare[:40]), (True, kept[:40])):
            replay(s, X, y, dict(kw, members=40, keep_members=keep), res, tmp / f"warm-{s.name}.jsonl")
    for keep, res in ((False, bare), (True, kept)):
        cfg_kw = dict(kw, members=a.members, keep_members=keep, threads=2)
        best, out = {}, {}
        for r in range(a.rounds):
            for s in (sides if r % 2 == 0 else sides[::-1]):
                p = tmp / f"{s.name}-{r}-{keep}.jsonl"
                got = replay(s, X, y, cfg_kw, res, p)
                p.unlink()
                if s.name not in best or got[0] < best[s.name][0]:
                    best[s.name] = got
                out[s.name] = got
        same = out["old"][2] == out["new"][2] and same_arrays(out["old"][3], out["new"][3])
        mode = "kept" if keep else "estimate-only"
        print(f"replay, {mode}, {a.members} members, best of {a.rounds} (CPU; parts in perf_counter ms per member):")
        for s in ("old", "new"):
            cpu, parts, _, _ = best[s]
            per = {k: 1e3 * v / a.members for k, v in parts.items()}
            print(f"  {s}: {1e3 * cpu / a.members:.3f} ms a member, {a.members / cpu:,.0f} members/s; fold "
                  f"{per['fold']:.3f}, measure points {per['measures']:.3f}, refits {per['refits']:.3f} (in the "
                  f"fold), journal line {per['journal']:.3f}, event and the rest {per['rest']:.3f}; final fit "
                  f"{1e3 * parts['final']:.1f} ms once ({per['final']:.3f} a member)", flush=True)
        print(f"  new/old CPU {best['new'][0] / best['old'][0]:.3f}; same journal figures and model arrays: {same}",
              flush=True)
    if a.no_runs:
        return
    for threads in (1, 2):
        cfg_kw = dict(kw, members=a.run_members, threads=threads)
        res = {"old": [], "new": []}
        for r in range(2):
            for s in (sides if r % 2 == 0 else sides[::-1]):
                res[s.name].append(real_run(s, X, y, cfg_kw, tmp / f"run-{s.name}.jsonl"))
        o, n = min(x[0] for x in res["old"]), min(x[0] for x in res["new"])
        print(f"real runs, kept, threads={threads}, {a.run_members} members, best of 2: driver between members "
              f"old {1e3 * o:.3f} ms ({1 / o:,.0f} members/s), new {1e3 * n:.3f} ms ({1 / n:,.0f} members/s), "
              f"new/old {n / o:.3f}; run wall old {min(x[1] for x in res['old']):.1f} s, new "
              f"{min(x[1] for x in res['new']):.1f} s; load {os.getloadavg()[0]:.2f}", flush=True)


if __name__ == "__main__":
    main()
