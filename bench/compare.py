"""`baggr compare` of 6 candidates against 6 separate `baggr train` runs of the same settings, on an
R1-shaped table (twonorm 100,000 x 20 written as CSV), whole commands in subprocesses, alternately
(compare first in even rounds, trains first in odd ones); the figure is the median of the per-round
ratios compare / trains. Also: peak resident memory of each command (sampled every 5 ms), what
reading and binning the table costs once (time and memory), and a check that the candidates'
models equal the separate runs' bit for bit.
    python bench/compare.py [members] [rounds] [rows]
"""
import os
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np
import psutil
import pyarrow as pa
import pyarrow.csv as pacsv

from util import PeakRSS, mib, twonorm

ROOT = Path(__file__).resolve().parents[1]
FPS, LEAVES = (2, 4, 8), (1, 5)


def run(args):
    """Run `python -m baggr.cli args` to the end: (seconds, peak RSS of the process)."""
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    t0 = time.perf_counter()
    proc = subprocess.Popen([sys.executable, "-m", "baggr.cli", *map(str, args)], stdout=subprocess.DEVNULL,
                            stderr=subprocess.PIPE, env=env, cwd=ROOT)
    peak, ps = 0, psutil.Process(proc.pid)

    def sample():
        nonlocal peak
        while proc.poll() is None:
            try:
                peak = max(peak, ps.memory_info().rss)
            except psutil.Error:
                return
            time.sleep(0.005)
    t = threading.Thread(target=sample, daemon=True)
    t.start()
    _, err = proc.communicate()
    seconds = time.perf_counter() - t0
    t.join()
    if proc.returncode != 0:
        sys.exit(f"baggr {' '.join(map(str, args[:2]))} failed: {err.strip()}")
    return seconds, peak


def same_model(a: Path, b: Path) -> bool:
    sys.path.insert(0, str(ROOT))
    from baggr.model import npzfile
    _, x = npzfile.read(a)
    _, y = npzfile.read(b)
    return sorted(x) == sorted(y) and all(np.array_equal(x[k], y[k], equal_nan=True) for k in x)


def main():
    members = int(sys.argv[1]) if len(sys.argv) > 1 else 300
    rounds = int(sys.argv[2]) if len(sys.argv) > 2 else 3
    rows = int(sys.argv[3]) if len(sys.argv) > 3 else 100_000
    work = Path(tempfile.mkdtemp(prefix="bench-compare-"))
    X, y = twonorm(rows, seed=1)
    data = work / "r1.csv"
    pacsv.write_csv(pa.table({**{f"x{j}": X[:, j] for j in range(X.shape[1])}, "y": y}), data)
    common = ["--target", "y", "--members", members, "--threads", 2, "--no-ui"]
    run(["train", data, "--target", "y", "--members", 2, "--no-ui", "--run-dir", work / "warm"])  # numba caches
    print(f"R1-shaped table: {rows} rows x {X.shape[1]} features, {data.stat().st_size / 2**20:.1f} MiB CSV; "
          f"{len(FPS) * len(LEAVES)} candidates (features per split {FPS} x min leaf {LEAVES}) x {members} members, "
          f"2 threads")
    ratios, figures = [], []
    for r in range(rounds):
        t = {}

        def arm_compare():
            d = work / f"cmp{r}"
            s, peak = run(["compare", data, *common, "--features-per-split", ",".join(map(str, FPS)),
                           "--min-leaf", ",".join(map(str, LEAVES)), "--run-dir", d])
            t["compare"] = (s, peak)

        def arm_trains():
            total, peak = 0.0, 0
            for k in FPS:
                for leaf in LEAVES:
                    s, p = run(["train", data, *common, "--features-per-split", k, "--min-leaf", leaf,
                                "--run-dir", work / f"train{r}-{k}-{leaf}"])
                    total, peak = total + s, max(peak, p)
            t["trains"] = (total, peak)
        for arm in ((arm_compare, arm_trains) if r % 2 == 0 else (arm_trains, arm_compare)):
            arm()
        ratios.append(t["compare"][0] / t["trains"][0])
        figures.append(t)
        print(f"round {r}: compare {t['compare'][0]:.1f} s (peak {mib(t['compare'][1])}), 6 trains "
              f"{t['trains'][0]:.1f} s (largest peak {mib(t['trains'][1])}); compare / trains {ratios[-1]:.3f}",
              flush=True)
    same = all(same_model(work / f"cmp0/c{i + 1}-fps{k}-leaf{leaf}/model.npz", work / f"train0-{k}-{leaf}/model.npz")
               for i, (k, leaf) in enumerate((k, leaf) for k in FPS for leaf in LEAVES))
    print(f"median compare / trains {statistics.median(ratios):.3f} (range {min(ratios):.3f}-{max(ratios):.3f}, "
          f"{rounds} rounds); models bit-identical to the separate runs: {same}")

    # reading and binning once: time and memory of the step that 6 separate runs do 6 times
    sys.path.insert(0, str(ROOT))
    from baggr.config import Config
    from baggr.data.prepared import prepare
    from baggr.data.table import read_table
    with PeakRSS() as mem:
        t0 = time.perf_counter()
        Xt, yt = read_table(data, "y")
        prep = prepare(Xt, yt, Config(), target="y")
        took = time.perf_counter() - t0
    codes = prep.codes.nbytes
    print(f"read + bin once: {took:.2f} s, peak {mib(mem.peak - mem.start)} above the start; the binned codes "
          f"{mib(codes)} (+ targets {mib(prep.y_class.nbytes)})")
    print(f"binning once saves 5 x {took:.2f} s = {5 * took:.1f} s of the 6 separate runs' reading and binning, "
          f"and 5 x {mib(codes)} = {mib(5 * codes)} of codes that 6 runs side by side would each hold")
    peaks_c = [f["compare"][1] for f in figures]
    peaks_t = [f["trains"][1] for f in figures]
    print(f"peak RSS: compare {mib(statistics.median(peaks_c))} against one train {mib(statistics.median(peaks_t))} "
          f"(6 trains side by side: about {mib(6 * statistics.median(peaks_t))}) (medians over rounds)")
    print(f"work folder (remove when done): {work}")


if __name__ == "__main__":
    main()
