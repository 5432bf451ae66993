"""Scoring speed and model size on P1 (DESIGN.md: twonorm 30,000 x 20, 300 members, full trees).

Prints, from one run: the seconds to train the model and to score its 30,000 training rows
(ens.predict, binning included, all threads), each the best of a few rounds taken in turn, and
their ratio (target <= 0.25); ns per (row, member); the compact scorer on one thread against a
calibration walk (the plainest walk: one row at a time down the same compact trees, numeric
splits only) and against the version-1 scorer (tests/reference_scoring.py); mean path length;
the model file's bytes per node for hard votes, leaf shares and regression (Friedman #1 with 20
features on the same rows), stored and compressed, with load times.
    python bench/predict.py [members] [rounds]
"""
import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

import baggr
from baggr import data
from baggr.jit import kernel
from baggr.model.compact import KINDS
from baggr.model.predict_kernels import score_compact
from util import friedman1, twonorm
from reference_scoring import score_rows  # noqa: E402  (tests/ is on the path through util)

M32 = np.uint64(0xFFFFFFFF)


@kernel
def _calibration_walk(codes, nodes, offset):
    """The plainest walk: each row alone from the root until it stops moving (a leaf points at
    itself), tree after tree; returns the steps taken (sum of path lengths) and a checksum."""
    steps, check = 0, 0
    last = codes.shape[0] - 1
    for t in range(offset.shape[0] - 1):
        s0 = offset[t]
        for i in range(codes.shape[1]):
            v = 0
            while True:
                r = nodes[s0 + v]
                f = min(np.int64(r >> np.uint64(44)), last)
                nxt = np.int64(r & M32) + np.int64(np.int64(codes[f, i]) > (np.int64(r >> np.uint64(36)) & 255))
                if nxt == v:
                    break
                v = nxt
                steps += 1
            check += v
    return steps, check


def _thread_seconds(fn):
    """CPU seconds of this thread spent in fn (time other processes take from the core is not counted)."""
    t0 = time.thread_time()
    fn()
    return time.thread_time() - t0


def speed(members, rounds):
    X, y = twonorm(30_000, seed=1)
    n = X.shape[0]
    cfg = baggr.Config(members=members, seed=1)
    baggr.train(X[:2000], y[:2000], cfg.replace(members=4)).predict(X[:100])  # compile
    train_s, score_s, train_cpu, score_cpu = [], [], [], []
    for _ in range(rounds):
        t0, c0 = time.perf_counter(), time.process_time()
        ens = baggr.train(X, y, cfg)
        train_s.append(time.perf_counter() - t0)
        train_cpu.append(time.process_time() - c0)
        ens.compact  # packed once per model, as at the end of a run or on load: not per scoring
        t0, c0 = time.perf_counter(), time.process_time()
        ens.predict(X)
        score_s.append(time.perf_counter() - t0)
        score_cpu.append(time.process_time() - c0)
    tr, sc = min(train_s), min(score_s)
    per = sc / (n * members) * 1e9
    print(f"P1 twonorm {n:,} x {X.shape[1]}, {members} members, full trees, {ens.config.resolved_threads()} threads, "
          f"best of {rounds}")
    print(f"  train {tr:.3f} s, score the training rows {sc:.3f} s: score/train {sc / tr:.3f} (target <= 0.25)")
    print(f"  rounds: train {', '.join(f'{t:.2f}' for t in train_s)}; score {', '.join(f'{t:.3f}' for t in score_s)}")
    print(f"  CPU seconds of all threads (other load adds none): train {min(train_cpu):.3f}, score "
          f"{min(score_cpu):.3f}, score/train {min(score_cpu) / min(train_cpu):.3f}")
    print(f"  {per:.1f} ns per (row, member), wall time, all threads")

    codes = data.encode(X, ens.schema, ens.binning)
    c = ens.compact
    a = c.arrays
    fw = ens.forest.arrays
    votes = np.zeros((n, c.n_out), np.int32)

    def new():
        votes[:] = 0
        score_compact(codes, 0, n, 8192, a["nodes"], a["offset"], a["leaf_offset"], a["leaves"], a["shares"],
                      KINDS[c.kind], c.has_cat, np.zeros((0, c.n_out)), votes)

    def old():
        score_rows(codes, 0, n, fw["left"], fw["right"], fw["feature"], fw["threshold"], fw["is_cat"],
                   fw["missing_left"], fw["cat_masks"], fw["value"], fw["node_offset"], fw["mask_offset"], True)

    steps = _calibration_walk(codes, a["nodes"], a["offset"])[0]
    t_new, t_old, t_cal = [], [], []
    for _ in range(rounds):
        t_new.append(_thread_seconds(new))
        t_old.append(_thread_seconds(old))
        t_cal.append(_thread_seconds(lambda: _calibration_walk(codes, a["nodes"], a["offset"])))
    k = n * members / 1e9
    tn, to, tc = min(t_new) / k, min(t_old) / k, min(t_cal) / k
    print(f"  one thread, CPU time (best of {rounds}): compact scorer {tn:.1f} ns per (row, member), "
          f"calibration walk {tc:.1f}, version-1 scorer {to:.1f}")
    print(f"  compact / calibration {tn / tc:.2f}; version-1 / compact {to / tn:.2f}x; mean path "
          f"{steps / (n * members):.1f} steps, {tn * n * members / steps:.2f} ns per step "
          f"(calibration {tc * n * members / steps:.2f})")
    return ens


def size(ens, members):
    X, y = twonorm(30_000, seed=1)
    Xr, yr = friedman1(30_000, seed=1, p=20)
    models = {"hard votes": ens,
              "leaf shares": baggr.train(X, y, baggr.Config(members=members, seed=1, vote="shares")),
              "regression": baggr.train(Xr, yr, baggr.Config(members=members, seed=1))}
    print(f"model file, {members} members (bytes per node = file bytes / nodes)")
    with tempfile.TemporaryDirectory() as tmp:
        for name, m in models.items():
            nodes = m.compact.n_nodes
            wide = sum(v.nbytes for v in m.forest.arrays.values())
            line = f"  {name}: {nodes:,} nodes; version 1 (arrays) {wide / nodes:.1f} B/node"
            for compress in (False, True):
                path = Path(tmp) / f"m{compress}.npz"
                m.save(path, compress=compress)
                loads = []
                for _ in range(3):
                    t0 = time.perf_counter()
                    baggr.load(path)
                    loads.append(time.perf_counter() - t0)
                what = "compressed" if compress else "stored"
                line += (f"; {what} {os.path.getsize(path) / nodes:.2f} B/node ({os.path.getsize(path) / 2**20:.1f} MiB,"
                         f" load {min(loads) * 1e3:.0f} ms)")
            print(line)


def main(members=300, rounds=3):
    print(time.strftime("%Y-%m-%d %H:%M"), os.uname().machine, f"{os.cpu_count()} cores, "
          f"load average {os.getloadavg()[0]:.1f}")
    ens = speed(members, rounds)
    size(ens, members)


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:]))
