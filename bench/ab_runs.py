"""Whole training runs of this checkout against another one, alternately in one process.

The other checkout is imported under another name (a copy of its package folder renamed, so its
imports must be relative or name its package as `baggr`: the copy rewrites `baggr.` imports).
Each round runs old then new (then new then old, alternating), on the same prepared problem, and
the figure is the median of the per-round ratios new/old: minutes-apart runs on this shared VM
differ by 20-30% from host load alone (DEVELOPERS.md).
    python bench/ab_runs.py OLD_CHECKOUT [r1|r3] [members] [rounds] [threads]
"""
import gc
import importlib
import re
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

from util import friedman1, twonorm


def import_copy(checkout: Path, name: str):
    """The package `baggr` of `checkout`, copied to a temp folder as `name` and imported."""
    dst = Path(tempfile.gettempdir()) / f"ab-{name}"
    if dst.exists():
        shutil.rmtree(dst)
    shutil.copytree(checkout / "baggr", dst / name, ignore=shutil.ignore_patterns("__pycache__"))
    for p in (dst / name).rglob("*.py"):
        s = p.read_text()
        s2 = re.sub(r"\bfrom baggr([. ])", rf"from {name}\1", s)
        s2 = re.sub(r"\bimport baggr\.", f"import {name}.", s2)
        if s2 != s:
            p.write_text(s2)
    sys.path.insert(0, str(dst))
    return importlib.import_module(name)


def main():
    if len(sys.argv) < 2:
        sys.exit(__doc__)
    old = import_copy(Path(sys.argv[1]).resolve(), "baggr_old")
    new = import_copy(Path(__file__).resolve().parents[1], "baggr_new")
    prob = sys.argv[2] if len(sys.argv) > 2 else "r1"
    members = int(sys.argv[3]) if len(sys.argv) > 3 else 48
    rounds = int(sys.argv[4]) if len(sys.argv) > 4 else 7
    threads = int(sys.argv[5]) if len(sys.argv) > 5 else 1
    if prob == "r1":
        X, y = twonorm(100_000, seed=1)
        kw = dict(features_per_split=4)
    elif prob == "r3":
        X, y = friedman1(100_000, seed=1)
        kw = dict(task="regression")
    else:
        sys.exit(f"unknown problem {prob!r}: r1 or r3")

    def timed(pkg):
        cfg = pkg.Config(members=members, seed=3, threads=threads, **kw)
        tr = pkg.Training(X, y, cfg)
        gc.collect()
        t0 = time.perf_counter()
        ens = tr.run()
        return time.perf_counter() - t0, ens

    timed(old), timed(new)   # compile / load caches
    gc.freeze()
    ratios = []
    for r in range(rounds):
        order = (old, new) if r % 2 == 0 else (new, old)
        t = {}
        for pkg in order:
            t[pkg.__name__], ens = timed(pkg)
        ratios.append(t["baggr_new"] / t["baggr_old"])
        print(f"round {r}: old {t['baggr_old']:.2f} s  new {t['baggr_new']:.2f} s  new/old {ratios[-1]:.3f}")
    print(f"{prob}, {members} members, threads {threads}: median new/old {statistics.median(ratios):.3f} "
          f"(range {min(ratios):.3f}-{max(ratios):.3f}, {rounds} rounds)")


if __name__ == "__main__":
    main()
