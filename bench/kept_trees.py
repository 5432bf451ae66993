"""What keeping the trees costs in memory during a run, against the bytes the model file stores.

R3 (Friedman #1 100,000 x 10, full regression trees, about 126,000 nodes a tree) and P1 (twonorm
30,000 x 20, full trees, hard votes), threads 2, members kept. Prints the run's time and the part
of it after the last member (making the ensemble); the resident memory at the first measured
member, at the last, at the peak and after; and the growth of resident memory from that member to
the last against the kept trees' bytes for those members (what the model file stores for them).

    python bench/kept_trees.py [members] [r3|p1 ...]
"""
import sys
import time

import psutil

import baggr
from baggr.data.prepared import prepare
from baggr.engine import Training
from util import PeakRSS, friedman1, mib, twonorm


def one(name, X, y, members):
    cfg = baggr.Config(members=members, min_leaf=1, seed=1, threads=2)
    prep = prepare(X, y, cfg)
    tr = Training(X, y, cfg, prepared=prep)
    tr.warm_up()
    proc = psutil.Process()
    first = max(2, members // 8)
    at = {}

    def on_member(ev):
        if ev.member in (first, members):
            at[ev.member] = (time.perf_counter(), proc.memory_info().rss)

    base = proc.memory_info().rss
    with PeakRSS() as p:
        t0 = time.perf_counter()
        ens = tr.run(on_member=on_member)
        t1 = time.perf_counter()
    kept = ens.compact
    early = tr.kept(0, first).nbytes
    grew = at[members][1] - at[first][1]
    later = kept.nbytes - early
    print(f"{name}, {members} members kept, threads 2: run {t1 - t0:.2f} s, of which {1e3 * (t1 - at[members][0]):.0f} ms "
          f"after the last member; {kept.n_nodes:,} nodes, kept trees {mib(kept.nbytes)} "
          f"({kept.nbytes / kept.n_nodes:.2f} B/node)")
    print(f"  resident: before {mib(base)}, member {first} {mib(at[first][1])}, member {members} "
          f"{mib(at[members][1])}, peak {mib(p.peak)}, after {mib(proc.memory_info().rss)}")
    print(f"  members {first + 1}..{members}: resident +{mib(grew)} against their trees' {mib(later)} "
          f"({grew / later:.2f}x; {grew / (kept.n_nodes * (members - first) / members):.2f} B/node)")


def main():
    members = int(sys.argv[1]) if len(sys.argv) > 1 else 64
    which = sys.argv[2:] or ["r3", "p1"]
    print(time.strftime("%Y-%m-%d %H:%M"))
    for name in which:
        if name == "r3":
            X, y = friedman1(100_000, 0)
            one("R3 (Friedman #1 100,000 x 10)", X, y, members)
        else:
            X, y = twonorm(30_000, seed=1)
            one("P1 (twonorm 30,000 x 20)", X, y, members)


if __name__ == "__main__":
    main()
