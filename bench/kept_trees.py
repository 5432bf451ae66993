"""What keeping the trees costs at the end of a run: R3 (Friedman #1 100,000 x 10, full regression
trees, 126,000 nodes a tree), threads 2, members kept.

Prints the run's time and the part of it after the last member (making the ensemble), and the
resident memory at the last member, at the peak of the run, and after it.

    python bench/kept_trees.py [members]
"""
import sys
import time

import psutil

import baggr
from baggr.data.prepared import prepare
from baggr.engine import Training
from util import PeakRSS, friedman1, mib


def main():
    members = int(sys.argv[1]) if len(sys.argv) > 1 else 64
    X, y = friedman1(100_000, 0)
    cfg = baggr.Config(members=members, min_leaf=1, seed=1, threads=2)
    prep = prepare(X, y, cfg)
    tr = Training(X, y, cfg, prepared=prep)
    proc = psutil.Process()
    last = {}

    def on_member(ev):
        if ev.member == members:
            last["t"], last["rss"] = time.perf_counter(), proc.memory_info().rss

    with PeakRSS() as p:
        t0 = time.perf_counter()
        ens = tr.run(on_member=on_member)
        t1 = time.perf_counter()
    print(f"R3, {members} members kept, threads 2: run {t1 - t0:.2f} s, of which {1e3 * (t1 - last['t']):.0f} ms "
          f"after the last member (making the ensemble); {ens.forest.arrays['left'].shape[0]:,} nodes")
    print(f"resident memory: at the last member {mib(last['rss'])}, peak {mib(p.peak)}, "
          f"after the run {mib(proc.memory_info().rss)}")

if __name__ == "__main__":
    main()
