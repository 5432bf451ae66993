"""The job's speed with the dashboard attached against without one (issue: within 2%).

Runs the same `baggr train --no-ui` job (R1 twonorm, 100,000 x 20, features_per_split 4) several
times, alternating no dashboard / the real dashboard attached in tmux, and prints for each job:
its training time (end line), its steady rate (seconds per member over the last two thirds of the
members, from the member lines: the dashboard's own start-up, about a second of one core, is over
by then) and the dashboard's CPU use. Then the ratios of the medians.
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

import psutil
import pyarrow as pa
import pyarrow.parquet as pq

from util import twonorm

BAGGR = [sys.executable, "-m", "baggr.cli"]


def figures(run_dir: str) -> tuple[float, float]:
    """(training seconds, seconds per member over the last two thirds) from the journal."""
    elapsed, end = {}, None
    with open(os.path.join(run_dir, "journal.jsonl")) as f:
        for line in f:
            ev = json.loads(line)
            if ev.get("event") == "member":
                elapsed[ev["member"]] = float(ev["elapsed"])
            elif ev.get("event") == "end":
                end = ev
    if end is None or not elapsed:
        raise SystemExit(f"the job in {run_dir} did not finish (no end line or no members)")
    last = max(elapsed)
    first = last // 3
    return float(end["elapsed"]), (elapsed[last] - elapsed[first]) / (last - first)


def job(data: str, run_dir: str, members: int, attach: bool) -> tuple[float, float, float]:
    cmd = BAGGR + ["train", data, "--target", "y", "--members", str(members), "--features-per-split", "4",
                   "--run-dir", run_dir, "--force", "--no-ui"]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    sock = f"baggr-bench-{os.getpid()}"
    cpu = 0.0
    if attach:
        while not os.path.exists(os.path.join(run_dir, "journal.jsonl")):
            time.sleep(0.05)
        subprocess.run(["tmux", "-L", sock, "new-session", "-d", "-s", "b", "-x", "120", "-y", "40",
                        f"exec {os.environ.get('DASH_PREFIX', '')} {sys.executable} -m tui {run_dir}"], check=True)
        pid = int(subprocess.run(["tmux", "-L", sock, "list-panes", "-t", "b", "-F", "#{pane_pid}"],
                                 capture_output=True, text=True).stdout.split()[0])
        dash = psutil.Process(pid)
    err = proc.communicate()[1]
    if proc.returncode != 0:
        raise SystemExit(f"the job failed ({proc.returncode}): {err.strip()}")
    if attach:
        c = dash.cpu_times()
        cpu = c.user + c.system + c.children_user + c.children_system
        subprocess.run(["tmux", "-L", sock, "kill-server"], check=False)
    total, per = figures(run_dir)
    return total, per, cpu


def main(members=600, rounds=3):
    if not shutil.which("tmux"):
        sys.exit("tmux is needed to attach a real dashboard")
    print(time.strftime("%Y-%m-%d"), os.uname().machine, f"{os.cpu_count()} cores, "
          f"load average {os.getloadavg()[0]:.2f}")
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
            (pt, pp, _), (at, ap, ac) = plain[-1], attached[-1]
            print(f"round {r + 1}: without {pt:.2f} s ({pp * 1e3:.2f} ms/member steady), "
                  f"with dashboard {at:.2f} s ({ap * 1e3:.2f} ms/member steady; dashboard used {ac:.2f} s "
                  f"of CPU = {ac / at * 100:.1f}% of one core)")
        med = [statistics.median(v) for v in zip(*plain)], [statistics.median(v) for v in zip(*attached)]
        (pt, pp, _), (at, ap, ac) = med
        print(f"R1 {members} members, medians of {rounds}: training {pt:.2f} s without, {at:.2f} s with the "
              f"dashboard ({(at / pt - 1) * 100:+.1f}%); steady {pp * 1e3:.2f} against {ap * 1e3:.2f} ms/member "
              f"({(ap / pp - 1) * 100:+.1f}%); dashboard CPU {ac / at * 100:.1f}% of one core")


if __name__ == "__main__":
    main(*(int(v) for v in sys.argv[1:]))
