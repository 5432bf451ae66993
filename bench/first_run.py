"""A first run with an empty numba cache, as a new user meets it: when the compile note comes, how long
until training starts, and the elapsed time the run then reports (compile time must stay out of it).

Runs `python -m baggr.cli train --no-ui` on small generated tables (classes, then regression) with
NUMBA_CACHE_DIR pointing at a fresh folder, then once more warm. Prints seconds since the command began
at each line of interest, and the CPU seconds the job spent from the note to its first member (the
compile's own cost, about its wall time on an idle core). Usage: bench/first_run.py [rows]
"""
from __future__ import annotations

import os
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import psutil
import pyarrow as pa
import pyarrow.csv as pacsv

ROOT = Path(__file__).resolve().parent.parent


def table(path: Path, rows: int, task: str) -> Path:
    rng = np.random.default_rng(0)
    X = rng.normal(size=(rows, 8))
    cols = {f"x{j}": X[:, j] for j in range(8)}
    cols["site"] = rng.choice(["a", "b", "c"], rows)
    cols["y"] = np.where(X[:, 0] + X[:, 1] > 0, "p", "q") if task == "classes" else X[:, 0] * 3 + X[:, 1]
    pacsv.write_csv(pa.table(cols), path)
    return path


def run(data: Path, cache: Path, run_dir: Path) -> dict:
    env = dict(os.environ, NUMBA_CACHE_DIR=str(cache), PYTHONPATH=str(ROOT))
    t0 = time.perf_counter()
    p = subprocess.Popen([sys.executable, "-m", "baggr.cli", "train", str(data), "--target", "y", "--members", "50",
                          "--run-dir", str(run_dir), "--force", "--no-ui"], stdout=subprocess.PIPE, text=True, env=env)
    out = {}
    proc = psutil.Process(p.pid)
    for line in p.stdout:
        t = time.perf_counter() - t0
        if line.startswith("preparing compiled code"):
            out["note"] = (t, line.strip())
            out["cpu_note"] = sum(proc.cpu_times()[:2])
        elif line.startswith("training:"):
            out["training"] = t
            out["cpu_training"] = sum(proc.cpu_times()[:2])
        elif line.startswith("finished:"):
            out["finished"] = t
            m = re.search(r"members in ([\d.]+) s", line)
            out["reported"] = float(m.group(1)) if m else None
    p.wait()
    return out


def main() -> None:
    rows = int(sys.argv[1]) if len(sys.argv) > 1 else 2000
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        cache = tmp / "numba-cache"
        for task in ("classes", "regression"):
            data = table(tmp / f"{task}.csv", rows, task)
            for kind in ("cold", "warm"):
                r = run(data, cache, tmp / f"run-{task}-{kind}")
                note = r.get("note")
                print(f"{task:10s} {kind}: note at {note[0]:.1f} s ({note[1]!r})" if note else
                      f"{task:10s} {kind}: no note", end="")
                cpu = r.get("cpu_training", 0.0) - r.get("cpu_note", 0.0)
                print(f"; training: at {r.get('training', float('nan')):.1f} s; finished at "
                      f"{r.get('finished', float('nan')):.1f} s; elapsed reported {r.get('reported')} s; "
                      f"CPU from the note to training: {cpu:.1f} s; load {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
