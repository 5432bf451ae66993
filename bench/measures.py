"""What the measure curve costs: every OOB measure at the log-spaced sizes, computed while the run goes.

For R1 (twonorm 100,000 x 20, full trees, 4 features per split) and R3 (Friedman #1 100,000 x 10)
prints the points computed, the seconds spent on them (main thread, between folds), per point,
and their share of member time (the members' own grow seconds, summed over threads), at one and
two threads. Also R1 with leaf-share votes: full trees' leaves are pure, so the shares are whole
numbers counted like hard votes; with min_leaf 5 they are fractions, summed per row.
    python bench/measures.py [members ...]
"""
import os
import sys
import time

import numpy as np

import baggr
from baggr.data.prepared import prepare
from baggr.engine import Training
from util import friedman1, twonorm


def run(name, X, y, cfg, members_list, threads_list=(1, 2)):
    baggr.train(X[:2000], y[:2000], cfg.replace(members=45))   # warm the kernels (both measure paths)
    prep = prepare(X, y, cfg)
    for members in members_list:
        for threads in threads_list:
            ens = Training(X, y, cfg.replace(members=members, threads=threads), prepared=prep).run()
            s = ens.stats
            points = int(ens.oob.arrays()["measure_sizes"].shape[0])
            member_ms = s["grow_seconds"] / members * 1e3
            print(f"  {name}, {members} members, threads={threads}: {points} points, "
                  f"{s['measure_seconds'] * 1e3:.1f} ms in all, {s['measure_seconds'] / points * 1e3:.2f} ms a point; "
                  f"member time {member_ms:.1f} ms; measures {s['measure_seconds'] / s['grow_seconds'] * 100:.2f}% "
                  f"of member time, {s['fold_seconds'] / s['grow_seconds'] * 100:.2f}% for the tally fold")


def main(members=(100, 300)):
    print(time.strftime("%Y-%m-%d %H:%M"), os.uname().machine, f"{os.cpu_count()} cores, "
          f"load average {os.getloadavg()[0]:.2f}")
    X, y = twonorm(100_000, seed=1)
    cfg = baggr.Config(features_per_split=4, seed=1)
    run("R1", X, y, cfg, members)
    run("R1 vote=shares", X, y, cfg.replace(vote="shares"), members[:1], (1,))
    run("R1 vote=shares min_leaf=5", X, y, cfg.replace(vote="shares", min_leaf=5), members[:1], (1,))
    X, y = friedman1(100_000, seed=1)
    run("R3", X, y, baggr.Config(seed=1), members[:1], (1,))
    print(f"  load average {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main(tuple(int(a) for a in sys.argv[1:]) or (100, 300))
