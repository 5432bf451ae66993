"""What --importance costs: the OOB permutation importance and impurity decrease of every member.

For R1 (twonorm 100,000 x 20, full trees, 4 features per split) and R3 (Friedman #1 100,000 x 10)
prints each member's importance time against its grow time (both measured in the worker, summed
over the run), and the whole run's wall time with and without importance, taken in turns.
    python bench/importance.py [members] [rounds]
"""
import os
import sys
import time

import numpy as np

import baggr
from baggr.data.prepared import prepare
from baggr.engine import Training
from util import friedman1, twonorm


def run(name, X, y, cfg, members, rounds):
    baggr.train(X[:2000], y[:2000], cfg.replace(members=4, importance=True))   # warm the kernels
    prep = prepare(X, y, cfg)
    shares, walls = [], {True: [], False: []}
    for _ in range(rounds):
        for imp in (False, True):
            c = cfg.replace(members=members, importance=imp, threads=1)
            t0 = time.perf_counter()
            ens = Training(X, y, c, prepared=prep).run()
            walls[imp].append(time.perf_counter() - t0)
            if imp:
                s = ens.stats
                shares.append(s["importance_seconds"] / s["grow_seconds"])
                member_ms = s["grow_seconds"] / members * 1e3
                imp_ms = s["importance_seconds"] / members * 1e3
    ratio = np.array(walls[True]) / np.array(walls[False])
    print(f"  {name}, {members} members, threads=1: member {member_ms:.1f} ms, importance {imp_ms:.1f} ms a member "
          f"(last round); importance / member time, median of {rounds} rounds {np.median(shares) * 100:.0f}% "
          f"(range {min(shares) * 100:.0f}-{max(shares) * 100:.0f}%); whole run with / without, median "
          f"{np.median(ratio):.2f}x")


def main(members=24, rounds=3):
    print(time.strftime("%Y-%m-%d %H:%M"), os.uname().machine, f"{os.cpu_count()} cores, "
          f"load average {os.getloadavg()[0]:.2f}")
    X, y = twonorm(100_000, seed=1)
    run("R1", X, y, baggr.Config(features_per_split=4, seed=1), members, rounds)
    X, y = friedman1(100_000, seed=1)
    run("R3", X, y, baggr.Config(seed=1), members // 2, rounds)
    print(f"  load average {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:]))
