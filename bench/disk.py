"""Disk a run directory takes: at its peak (sampled every 2 ms, the final model write included) and
after a finished and a stopped run, against the size of model.npz; the model's tree parts (one a
checkpoint) and what they cost against the same model saved in one part.

Runs `baggr train` (a subprocess, --no-ui) on twonorm 30,000 x 20 with full trees; the stopped run
is asked to stop (DIR/stop) once half its members are done.
    python bench/disk.py [members]
"""
import os
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np

from util import twonorm


def du(path: Path) -> int:
    total = 0
    for root, _, files in os.walk(path):
        for f in files:
            try:
                total += os.path.getsize(os.path.join(root, f))
            except OSError:
                pass
    return total


def run(data: Path, rd: Path, members: int, stop_at: int | None):
    peak = [0]
    done = threading.Event()

    def sample():
        while not done.is_set():
            peak[0] = max(peak[0], du(rd))
            if stop_at is not None and (rd / "journal.jsonl").exists():
                n = sum(1 for line in open(rd / "journal.jsonl") if '"member"' in line)
                if n >= stop_at and not (rd / "stop").exists() and not (rd / "model.npz").exists():
                    (rd / "stop").touch()
            time.sleep(0.002)
    t = threading.Thread(target=sample, daemon=True)
    t.start()
    subprocess.run([sys.executable, "-m", "baggr.cli", "train", str(data), "--target", "label", "--members",
                    str(members), "--seed", "1", "--no-ui", "--run-dir", str(rd)], check=True, capture_output=True)
    done.set()
    t.join()
    model = (rd / "model.npz").stat().st_size
    chunks = du(rd / "members") if (rd / "members").exists() else 0
    import baggr
    from baggr.model import npzfile
    parts = len(npzfile.read(rd / "model.npz")[0]["trees"]["parts"])
    baggr.load(rd / "model.npz").save(rd.parent / "one-part.npz")
    one = (rd.parent / "one-part.npz").stat().st_size
    return peak[0], du(rd), model, chunks, parts, one


def main(members=300):
    X, y = twonorm(30_000, seed=1)
    with tempfile.TemporaryDirectory() as tmp:
        data = Path(tmp) / "twonorm.csv"
        head = ",".join([f"x{j}" for j in range(X.shape[1])] + ["label"])
        np.savetxt(data, np.column_stack([X, y]), delimiter=",", header=head, comments="", fmt="%.6g")
        print(f"{time.strftime('%Y-%m-%d %H:%M')} twonorm 30,000 x 20, full trees, {members} members")
        for what, stop in (("finished", None), ("stopped at half", members // 2)):
            t0 = time.perf_counter()
            peak, after, model, chunks, parts, one = run(data, Path(tmp) / what.replace(" ", "-"), members, stop)
            print(f"  {what} ({time.perf_counter() - t0:.0f} s): model.npz {model / 2**20:.1f} MiB in {parts} parts "
                  f"(+{(model - one) / 2**10:.0f} KiB, {100 * (model - one) / one:.2f}% against one part); run directory "
                  f"at its peak {peak / 2**20:.1f} MiB ({peak / model:.2f}x the model), after {after / 2**20:.1f} MiB "
                  f"({after / model:.2f}x), files in members/ {chunks / 2**20:.1f} MiB")


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:]))
