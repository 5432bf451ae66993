"""The dashboard's CPU while it follows a job: `python -m tui` in tmux (120 x 40) on a made-up journal
that another process appends to at RATE member lines a second, as a job would.

    python bench/follow.py [rate] [seconds] [--env "NAME=VALUE ..."]

Prints the dashboard's CPU (and per thread) and the tmux server's, as shares of one core. Quiet
machine: what the dashboard itself costs; bench/attached.py measures what it costs a real job.
"""
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import psutil

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from baggr.runs.journal import JOURNAL  # noqa: E402
from tui.fake import write_journal  # noqa: E402

WRITER = """
import random, sys, time
sys.path.insert(0, {root!r})
from baggr.runs.journal import JournalWriter
from tui.fake import member_fields
w = JournalWriter({path!r})
rng, m, t0 = random.Random(3), {first}, time.perf_counter()
while True:
    m += 1
    w.write("member", **member_fields(m, rng=rng))
    wait = t0 + (m - {first}) / {rate} - time.perf_counter()
    if wait > 0:
        time.sleep(wait)
"""


def cpu(p: psutil.Process) -> float:
    c = p.cpu_times()
    return c.user + c.system


def main() -> None:
    args = sys.argv[1:]
    env = ""
    if "--env" in args:
        i = args.index("--env")
        env = args[i + 1]
        del args[i:i + 2]
    rate = float(args[0]) if args else 45.0
    seconds = float(args[1]) if len(args) > 1 else 30.0
    if not __import__("shutil").which("tmux"):
        sys.exit("tmux is needed")
    with tempfile.TemporaryDirectory() as tmp:
        run = Path(tmp) / "run"
        write_journal(run, 300, members_target=100_000)
        writer = subprocess.Popen([sys.executable, "-c", WRITER.format(root=str(ROOT), path=str(run / JOURNAL),
                                                                       first=300, rate=rate)])
        sock = ["tmux", "-L", f"baggr-follow-{os.getpid()}"]
        try:
            subprocess.run(sock + ["new-session", "-d", "-s", "b", "-x", "120", "-y", "40",
                                   f"cd {ROOT} && {env} exec {sys.executable} -m tui {run}"], check=True)
            pane = int(subprocess.run(sock + ["list-panes", "-t", "b", "-F", "#{pane_pid}"],
                                      capture_output=True, text=True).stdout.split()[0])
            server = int(subprocess.run(sock + ["display-message", "-p", "#{pid}"],
                                        capture_output=True, text=True).stdout.split()[0])
            time.sleep(8)                         # opened and settled
            dash, tmux = psutil.Process(pane), psutil.Process(server)
            threads0 = {t.id: t.user_time + t.system_time for t in dash.threads()}
            c0, s0, t0 = cpu(dash), cpu(tmux), time.perf_counter()
            time.sleep(seconds)
            wall = time.perf_counter() - t0
            threads = sorted(((t.user_time + t.system_time - threads0.get(t.id, 0.0)) / wall, t.id)
                             for t in dash.threads())
            print(f"{time.strftime('%Y-%m-%d %H:%M')}, {os.cpu_count()} cores, load {os.getloadavg()[0]:.2f}; "
                  f"{rate:g} lines/s for {wall:.0f} s{', ' + env if env else ''}")
            print(f"dashboard {100 * (cpu(dash) - c0) / wall:.2f}% of one core (threads: "
                  + ", ".join(f"{100 * share:.2f}%{' main' if tid == pane else ''}"
                              for share, tid in reversed(threads) if share > 0) + ")"
                  f"; tmux server {100 * (cpu(tmux) - s0) / wall:.2f}%")
        finally:
            subprocess.run(sock + ["kill-server"], capture_output=True)
            writer.kill()


if __name__ == "__main__":
    main()
