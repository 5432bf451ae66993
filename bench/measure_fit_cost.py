"""What refitting the chosen --measure beside the error costs a run (baggr/oob/measure_fit.py).

A run refits after members 32, 64, 128, ... on about 1,024 sampled rows; with --measure other than
the error it fits that measure from the same priors (Tally.fits). Trains one run of `members` members
on twonorm (`rows` x 20, full trees, 4 features per split, 1 thread), then times the refit of the
tallies as they stand for each measure (median of `rounds`, after one warm call), against the
member time of the same run; and the finished ensemble's fit of every measure over all rows
(oob.measure_fits(), what a report makes).
    python bench/measure_fit_cost.py [rows] [members] [rounds]
"""
import statistics
import sys
import time

import baggr
from baggr.engine import Training
from baggr.oob import curve as cv
from util import twonorm


def main():
    rows = int(sys.argv[1]) if len(sys.argv) > 1 else 20_000
    members = int(sys.argv[2]) if len(sys.argv) > 2 else 128
    rounds = int(sys.argv[3]) if len(sys.argv) > 3 else 5
    X, y = twonorm(rows, seed=1)
    cfg = baggr.Config(members=members, features_per_split=4, seed=1, threads=1)
    tr = Training(X, y, cfg)
    tr.run(until=2)
    t0 = time.perf_counter()
    ens = tr.run()
    per_member = (time.perf_counter() - t0) / (members - 2)
    t = tr.tally
    print(f"twonorm {rows} x 20, {members} members: member time {per_member * 1e3:.1f} ms")
    names = ("error", "brier", "log-loss", "balanced-error", "auc")
    for m in names:      # warm: compile and the per-process tables
        t.measure = m
        t.fits(sample=cv.LIVE_ROWS)
    times = {m: [] for m in names}
    for _ in range(rounds):      # the measures in turn, round after round: a ratio within a round
        for m in names:
            t.measure = m
            t1 = time.perf_counter()
            t.fits(sample=cv.LIVE_ROWS)
            times[m].append(time.perf_counter() - t1)
    # refits after 32, 64, 128, ...: the refits by `members` members, as a share of their member time
    n_refits = len([b for b in (32 << j for j in range(30)) if b <= members])
    for m in names:
        med = statistics.median(times[m])
        ratio = statistics.median(a / b for a, b in zip(times[m], times["error"]))
        print(f"  refit with --measure {m:15s} {med * 1e3:7.1f} ms ({ratio:4.2f} x the error's alone, median of "
              f"per-round ratios); {n_refits} refits by {members} members = "
              f"{100 * n_refits * med / (members * per_member):.2f}% of member time")
    t1 = time.perf_counter()
    ens.oob.measure_fits()
    print(f"  the finished ensemble's fit of every measure over all rows: {(time.perf_counter() - t1) * 1e3:.0f} ms "
          f"(first call in the process, tables included)")


if __name__ == "__main__":
    main()
