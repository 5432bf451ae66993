"""Dashboard figures: open time of a 100,000-member journal, refresh rate under 500 lines/s, memory.

    .venv/bin/python bench/dashboard.py [--members 100000] [--rate 500] [--seconds 10]

Prints figures; asserts nothing about time.
"""
from __future__ import annotations

import argparse
import asyncio
import os
import random
import sys
import tempfile
import threading
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import psutil  # noqa: E402

from baggr.runs.journal import JOURNAL, JournalWriter, read_state  # noqa: E402
from tui.app import Dashboard  # noqa: E402
from tui.fake import member_fields, write_journal  # noqa: E402


def mb(n: float) -> str:
    return f"{n / 2**20:.1f} MB"


async def measure(run_dir: Path, members: int, rate: float, seconds: float, size) -> None:
    proc = psutil.Process()
    rss0 = proc.memory_info().rss
    t0 = time.perf_counter()
    app = Dashboard(run_dir)
    async with app.run_test(size=size) as pilot:
        while app.first_full_draw is None:
            await asyncio.sleep(0.01)
        t_draw = app.first_full_draw - t0
        await pilot.pause()                       # the compositor has painted that draw
        t_paint = time.perf_counter() - t0
        shown = app.view.members
        print(f"open: first full draw {t_draw:.2f} s, painted {t_paint:.2f} s "
              f"(members shown {shown:,} of {members:,}; curve arrays {mb(app.tail.state.curve_bytes())})")
        rss_open = proc.memory_info().rss

        # Another thread appends `rate` member lines a second, as a fast job would.
        stop = threading.Event()
        written = [members]
        writer_cpu = [0.0]

        def writer():
            rng = random.Random(3)
            w = JournalWriter(run_dir / JOURNAL)
            t_start = time.perf_counter()
            c0 = time.thread_time()
            k = 0
            while not stop.is_set():
                k += 1
                written[0] += 1
                w.write("member", **member_fields(written[0], rng=rng))
                delay = t_start + k / rate - time.perf_counter()
                if delay > 0:
                    time.sleep(delay)
            writer_cpu[0] = time.thread_time() - c0
            w.close()

        th = threading.Thread(target=writer, daemon=True)
        r0, c0, w0 = app.redraws, time.process_time(), time.perf_counter()
        th.start()
        lags = []
        while time.perf_counter() - w0 < seconds:
            await asyncio.sleep(0.25)
            if app.view is not None:
                lags.append(written[0] - app.view.members)
        stop.set()
        th.join()
        wall = time.perf_counter() - w0
        cpu = time.process_time() - c0 - writer_cpu[0]
        lines = written[0] - members
        await asyncio.sleep(0.6)                  # let the last lines arrive
        print(f"follow: {lines / wall:.0f} lines/s appended for {wall:.1f} s; "
              f"{(app.redraws - r0) / wall:.2f} redraws/s; "
              f"members behind the journal: median {sorted(lags)[len(lags) // 2]}, most {max(lags)}; "
              f"final {app.view.members:,} of {written[0]:,}")
        print(f"cpu: dashboard {100 * cpu / wall:.0f}% of one core (writer thread {100 * writer_cpu[0] / wall:.0f}%, "
              "not counted)")
        print(f"memory: rss before the app {mb(rss0)}, after opening {mb(rss_open)}, "
              f"after following {mb(proc.memory_info().rss)}")


def end_to_end(run_dir: Path, members: int, size, tries: int = 3) -> None:
    """`python -m tui RUN_DIR` in tmux, as a person starts it: seconds until the screen shows the count."""
    import shutil
    import subprocess
    tmux = shutil.which("tmux")
    if tmux is None:
        print("end to end: skipped (no tmux)")
        return
    root = Path(__file__).resolve().parents[1]
    sock = [tmux, "-L", f"baggr-bench-{os.getpid()}"]
    want = f"{members:,} of"
    times, rss, cpus = [], [], []
    try:
        for _ in range(tries):
            t0 = time.perf_counter()
            subprocess.run(sock + ["new-session", "-d", "-s", "b", "-x", str(size[0]), "-y", str(size[1]),
                                   f"cd {root} && exec {sys.executable} -m tui {run_dir}"], check=True)
            while True:
                out = subprocess.run(sock + ["capture-pane", "-p", "-t", "b"], capture_output=True, text=True).stdout
                if want in out and "by class" in out:
                    break
                if time.perf_counter() - t0 > 60:
                    raise SystemExit("end to end: the dashboard never showed the count:\n" + out)
                time.sleep(0.02)
            times.append(time.perf_counter() - t0)
            pid = int(subprocess.run(sock + ["list-panes", "-t", "b", "-F", "#{pane_pid}"],
                                     capture_output=True, text=True).stdout.split()[0])
            c = psutil.Process(pid).cpu_times()
            cpus.append(c.user + c.system + c.children_user + c.children_system)
            time.sleep(1.0)
            rss.append(psutil.Process(pid).memory_info().rss)
            subprocess.run(sock + ["send-keys", "-t", "b", "q"])
            while subprocess.run(sock + ["has-session", "-t", "b"], capture_output=True).returncode == 0:
                time.sleep(0.05)
    finally:
        subprocess.run(sock + ["kill-server"], capture_output=True)
    times.sort()
    print(f"end to end (python -m tui in tmux, {size[0]}x{size[1]}, start to the count on screen): "
          f"best {times[0]:.2f} s, median {times[len(times) // 2]:.2f} s of {tries}; "
          f"cpu time used by then (the dashboard and its opening-read child) {min(cpus):.2f} s; "
          f"dashboard process rss {mb(max(rss))}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--members", type=int, default=100_000)
    ap.add_argument("--rate", type=float, default=500.0)
    ap.add_argument("--seconds", type=float, default=10.0)
    ap.add_argument("--size", default="120x40")
    a = ap.parse_args()
    size = tuple(int(x) for x in a.size.split("x"))
    with tempfile.TemporaryDirectory() as tmp:
        run_dir = Path(tmp) / "run"
        t = time.perf_counter()
        path = write_journal(run_dir, a.members, members_target=10 * a.members)   # this process: running
        print(f"journal: {a.members:,} member lines, {path.stat().st_size / 2**20:.1f} MB, "
              f"written in {time.perf_counter() - t:.1f} s")
        t, c = time.perf_counter(), time.process_time()
        state = read_state(run_dir)
        print(f"read and fold alone: {time.perf_counter() - t:.2f} s ({state.members:,} members, "
              f"cpu {time.process_time() - c:.2f} s)")
        del state
        end_to_end(run_dir, a.members, size)
        asyncio.run(measure(run_dir, a.members, a.rate, a.seconds, size))
    import baggr.runs.journal_reader as journal
    print(f"machine: {os.cpu_count()} cpus, load {os.getloadavg()[0]:.1f}; "
          f"journal parser: {'orjson' if journal._orjson is not None else 'json (orjson not installed)'}")


if __name__ == "__main__":
    main()
