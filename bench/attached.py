"""The job's speed with the dashboard attached against without one (issue: within 2%).

Runs the same `baggr train --no-ui` job (R1 twonorm, 100,000 x 20, features_per_split 4) several
times, alternating no dashboard / the real dashboard attached in tmux, and prints each job's
training time from its journal's end line and the ratio of the medians.
    python bench/attached.py [members] [rounds]
"""
import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time

import pyarrow as pa
import pyarrow.parquet as pq

from util import twonorm

HERE = os.path.dirname(os.path.abspath(__file__))
BAGGR = [sys.executable, "-m", "baggr.cli"]


def elapsed(run_dir: str) -> float:
    with open(os.path.join(run_dir, "journal.jsonl")) as f:
        ends = [json.loads(x) for x in f if '"end"' in x]
    return float(ends[-1]["elapsed"])


def job(data: str, run_dir: str, members: int, attach: bool) -> float:
    cmd = BAGGR + ["train", data, "--target", "y", "--members", str(members), "--features-per-split", "4",
                   "--run-dir", run_dir, "--force", "--no-ui"]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    sock = f"baggr-bench-{os.getpid()}"
    if attach:
        while not os.path.exists(os.path.join(run_dir, "journal.jsonl")):
            time.sleep(0.05)
        subprocess.run(["tmux", "-L", sock, "new-session", "-d", "-x", "120", "-y", "40",
                        f"{sys.executable} -m tui {run_dir}"], check=True)
    proc.wait()
    if attach:
        subprocess.run(["tmux", "-L", sock, "kill-server"], check=False)
    return elapsed(run_dir)


def main(members=150, rounds=3):
    if not shutil.which("tmux"):
        sys.exit("tmux is needed to attach a real dashboard")
    print(time.strftime("%Y-%m-%d"), os.uname().machine, f"{os.cpu_count()} cores")
    with tempfile.TemporaryDirectory() as tmp:
        X, y = twonorm(100_000, seed=1)
        cols = {f"x{j}": X[:, j] for j in range(X.shape[1])}
        cols["y"] = y
        data = os.path.join(tmp, "twonorm.parquet")
        pq.write_table(pa.table(cols), data)
        job(data, os.path.join(tmp, "warm"), 4, False)  # compile / load the kernels once
        plain, attached = [], []
        for r in range(rounds):
            plain.append(job(data, os.path.join(tmp, f"p{r}"), members, False))
            attached.append(job(data, os.path.join(tmp, f"a{r}"), members, True))
            print(f"round {r + 1}: without {plain[-1]:.2f} s, with dashboard {attached[-1]:.2f} s")
        a, p = statistics.median(attached), statistics.median(plain)
        print(f"R1 {members} members: median {p:.2f} s without, {a:.2f} s with the dashboard attached: "
              f"{(a / p - 1) * 100:+.1f}%")


if __name__ == "__main__":
    main(*(int(v) for v in sys.argv[1:]))
