"""Training speed on R1 (twonorm, classes) and R3 (Friedman #1, regression), as in DESIGN.md.

Prints members per second of the training loop at threads 1 and 2 (the table is prepared once,
timed apart: binning is not member work), ns per (row, candidate feature) visit, the ratio of
member time to visits x the histogram-only calibration kernel measured in the same run, the share
of time spent folding tallies, peak RSS, and cold/warm start times of a fresh process. Figures
are the best of a few rounds: other load on a shared machine only ever adds time. The 2-thread
speed-up is the median over rounds of each round's ratio (a round runs threads=1 then threads=2):
a ratio of bests pairs runs minutes apart, and a burst of host speed in one of them moves it
by a third. It is given for whole runs and for the rate after the first members (a run's set-up,
its threads' first touch of their working arrays, do not shrink with threads; a long run pays
them once).
    python bench/speed.py [members] [rounds]
"""
import os
import subprocess
import sys
import tempfile
import time

import numpy as np

import baggr
from baggr.data.prepared import prepare
from baggr.engine import Training
from baggr.jit import kernel
from util import PeakRSS, friedman1, mib, twonorm


@kernel
def _histogram_only(codes, rows, y, w, feats, hist):
    """The unavoidable work: one weighted histogram update per (row, candidate feature), gathered rows."""
    for f in feats:
        c = codes[f]
        for i in range(rows.shape[0]):
            r = rows[i]
            hist[f, np.int64(c[r]) * 2 + y[r]] += w[r]


def calibration(codes, y):
    """A function timing _histogram_only over a node-sized gathered row set for a number of visits."""
    n = codes.shape[1]
    rng = np.random.default_rng(0)
    w = rng.poisson(1.0, n).astype(np.int32)
    rows = np.sort(rng.choice(n, n // 2, replace=False)).astype(np.int32)
    feats = np.arange(4, dtype=np.int64)
    hist = np.zeros((codes.shape[0], 512), np.int64)
    _histogram_only(codes, rows[:100], y, w, feats, hist)  # compile

    def ns_per_visit(visits: float) -> float:
        reps = max(1, int(visits / (rows.shape[0] * 4)))
        t0 = time.perf_counter()
        for _ in range(reps):
            _histogram_only(codes, rows, y, w, feats, hist)
        return (time.perf_counter() - t0) / (reps * rows.shape[0] * 4) * 1e9
    return ns_per_visit


def run(name, X, y, cfg, members, rounds=7):
    """Members per second of the training loop (prepare timed apart) and the calibration, each the
    best of a few rounds run in turn: load from elsewhere on a shared machine only ever adds time,
    and taking turns exposes all three to the same spells of it."""
    baggr.train(X[:2000], y[:2000], cfg.replace(members=2))  # warm the kernels
    t0 = time.perf_counter()
    prep = prepare(X, y, cfg)
    t_prep = time.perf_counter() - t0
    yy = (np.asarray(y) > np.median(y)).astype(np.int32) if prep.task == "regression" else prep.y_class
    cal_fn = calibration(prep.codes, yy)
    best, cal, pairs, steady = {}, np.inf, [], []
    skip = min(4, members - 2)  # members left out of the steady rate: per-run set-up, threads starting
    for _ in range(rounds):
        walls, rates = {}, {}
        for threads in (1, 2):
            c = cfg.replace(members=members, threads=threads)
            done = []
            with PeakRSS() as rss:
                t0 = time.perf_counter()
                ens = Training(X, y, c, prepared=prep).run(on_member=lambda e: done.append(time.perf_counter()))
                walls[threads] = wall = time.perf_counter() - t0
            rates[threads] = (len(done) - skip) / (done[-1] - done[skip - 1])
            if threads not in best or wall < best[threads][1]:
                best[threads] = (ens, wall, rss.peak)
            if threads == 1:
                cal = min(cal, cal_fn(ens.stats["visits"]))  # as many visits as the whole loop
        pairs.append(walls[1] / walls[2])
        steady.append(rates[2] / rates[1])
    ens, wall1, peak = best[1]
    wall2 = best[2][1]
    s = ens.stats
    member_s = s["grow_seconds"] / members
    visits = s["visits"] / members
    ns = member_s / visits * 1e9
    print(f"{name}: {X.shape[0]:,} rows x {X.shape[1]} features, {members} members, "
          f"features_per_split {cfg.resolved_features(X.shape[1], ens.task)}")
    print(f"  prepare (schema, binning, codes) {t_prep:.2f} s, once per run")
    print(f"  members/s (training loop, best of {rounds}): threads=1 {members / wall1:.2f}, threads=2 "
          f"{members / wall2:.2f}; with prepare: {members / (wall1 + t_prep):.2f} and {members / (wall2 + t_prep):.2f}")
    print(f"  2 threads against 1, median of {rounds} rounds: whole runs {np.median(pairs):.2f}x (rounds "
          f"{min(pairs):.2f}-{max(pairs):.2f}x; ratio of the bests {wall1 / wall2:.2f}x); after the first {skip} "
          f"members {np.median(steady):.2f}x (rounds {min(steady):.2f}-{max(steady):.2f}x)")
    print(f"  member time {member_s * 1e3:.1f} ms, visits/member {visits:,.0f}, {ns:.2f} ns/visit")
    print(f"  calibration (histogram only) {cal:.2f} ns/visit; ratio member/(visits x cal) {ns / cal:.2f}")
    print(f"  tally fold share {s['fold_seconds'] / wall1 * 100:.2f}% of wall time (threads=1); "
          f"copying kept trees into place {s['keep_seconds'] / wall1 * 100:.2f}% (main thread)")
    print(f"  nodes/member {s['nodes'] / members:,.0f}; OOB {'error' if ens.task == 'classes' else 'MSE'} "
          f"{ens.oob.error:.4f}; peak RSS {mib(peak)}; load average {os.getloadavg()[0]:.2f}")


COLD = """
import time, sys
t0 = time.perf_counter()
import numpy as np, baggr
rng = np.random.default_rng(0)
X = rng.normal(size=(2000, 10)); y = (X[:, 0] > 0).astype(int)
first = []
baggr.train(X, y, baggr.Config(members=3, threads=1), on_member=lambda e: first.append(time.perf_counter()))
print(first[0] - t0)
"""


def cold_start():
    with tempfile.TemporaryDirectory() as cache:
        env = dict(os.environ, NUMBA_CACHE_DIR=cache)
        times = [float(subprocess.run([sys.executable, "-c", COLD], env=env, capture_output=True,
                                      text=True, check=True).stdout.split()[-1]) for _ in range(2)]
    print(f"start to first member: cold cache {times[0]:.1f} s, warm cache {times[1]:.1f} s")


def main(members=16, rounds=7):
    print(time.strftime("%Y-%m-%d"), os.uname().machine, f"{os.cpu_count()} cores")
    X, y = twonorm(100_000, seed=1)
    run("R1 twonorm", X, y, baggr.Config(features_per_split=4, seed=1), members, rounds)
    X, y = friedman1(100_000, seed=1)
    run("R3 Friedman #1", X, y, baggr.Config(seed=1), members, rounds)
    cold_start()


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:]))
