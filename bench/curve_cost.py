"""What the estimated curve costs on R1 (twonorm 100,000 x 20, full trees, 4 features per split).

A run with a listener refits the estimate after members round(2^(j/2)) (baggr/oob/curve.py; the
prior on at most 4,096 rows, the estimate over all rows); the finished ensemble fits it once over
all rows. Prints, for runs of `members` members at 1 and 2 threads: member time (run seconds per
member), the refits' time per member and as a share of member time, the final fit's time, and the
whole run with a listener against one without (no refits), alternating, best of `rounds`.
    python bench/curve_cost.py [members] [rounds]
"""
import sys
import time

import baggr
from baggr.engine import Training, prepare
from util import twonorm


def one(X, y, prep, cfg, listen):
    tr = Training(X, y, cfg, prepared=prep)
    t0 = time.perf_counter()
    tr.run(on_member=(lambda ev: None) if listen else None)   # run() ends with the final fit
    total = time.perf_counter() - t0
    t1 = time.perf_counter()
    tr.tally.fit()
    final = time.perf_counter() - t1
    return total, tr.tally.refit_seconds, final


def main():
    members = int(sys.argv[1]) if len(sys.argv) > 1 else 128
    rounds = int(sys.argv[2]) if len(sys.argv) > 2 else 3
    X, y = twonorm(100_000, seed=1)
    for threads in (1, 2):
        cfg = baggr.Config(members=members, features_per_split=4, seed=1, threads=threads)
        prep = prepare(X, y, cfg)
        one(X, y, prep, cfg.replace(members=8), True)            # compile and warm
        best = {True: None, False: None}
        for _ in range(rounds):
            for listen in (True, False):
                r = one(X, y, prep, cfg, listen)
                if best[listen] is None or r[0] < best[listen][0]:
                    best[listen] = r
        (tot, refit, final), (tot0, _, _) = best[True], best[False]
        per = tot / members
        print(f"threads={threads}, {members} members: member time {per * 1e3:.2f} ms; refits {refit * 1e3:.1f} ms "
              f"in all, {refit / members * 1e3:.3f} ms a member = {100 * refit / tot:.2f}% of member time; "
              f"final fit {final * 1e3:.1f} ms ({100 * final / tot:.2f}% of the run); whole run with a listener "
              f"{tot:.2f} s, without {tot0:.2f} s ({100 * (tot / tot0 - 1):+.1f}%)", flush=True)


if __name__ == "__main__":
    main()
