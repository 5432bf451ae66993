"""The job's speed with the dashboard attached against without one (issue: within 2%).

One long `baggr train --no-ui --estimate-only` job (R1 twonorm, 100,000 x 20, features_per_split 4,
all cores; estimate-only so that thousands of members hold no trees)
and the real dashboard (`python -m tui` in tmux, 120 x 40) on it. The members are cut into short
windows; in every other one the dashboard is stopped (SIGSTOP: no CPU at all, as if not there),
in the others it runs (SIGCONT; it then also reads the lines it missed). Comparing windows of one
job takes out what differs between processes (memory placement alone moves a whole job by 10%
here), short windows take out the machine's slow drifts. Per window, the seconds per member come
from the member lines' elapsed times; each running window is compared with the mean of the
stopped windows on either side. The dashboard's start-up (about a second of one core) is
reported apart: it is paid once per attach. After each switch the job first runs SETTLE members
unmeasured: a dashboard continued after a stop reads and draws what it missed at once, a burst
that one attached all along never has (with 100-member windows and no settling it read as 4.2% of
a core against 2.9% with 400-member windows).
    python bench/attached.py [windows] [members_per_window] [--hog SHARE] [--settle MEMBERS]
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
# --hog SHARE: in place of the dashboard, a loop busy SHARE of each 10 ms (the bench's sensitivity)
HOG = "import time\nwhile True:\n    t = time.perf_counter()\n    while time.perf_counter() - t < {s} * 0.01: pass\n    time.sleep((1 - {s}) * 0.01)\n"


class Freezer:
    """Stops a process and all its threads without a signal (the cgroup freezer, v1 or v2).

    SIGSTOP would do, but Textual takes the SIGCONT after it as a return from the shell: it sets the
    terminal up again and lays out and paints the whole screen, a cost of the bench, not of a
    dashboard attached all along (measured: 3.1% of a core in the running windows against 1.5% for
    one following the same job without stops). Needs write access to /sys/fs/cgroup (root);
    without it the bench falls back to SIGSTOP and says so.
    """

    ROOTS = (("/sys/fs/cgroup/freezer", "freezer.state", "FROZEN", "THAWED"),
             ("/sys/fs/cgroup/unified", "cgroup.freeze", "1", "0"),
             ("/sys/fs/cgroup", "cgroup.freeze", "1", "0"))

    def __init__(self, proc: psutil.Process):
        self.proc, self.path = proc, None
        for root, knob, on, off in self.ROOTS:
            path = os.path.join(root, f"baggr-bench-{os.getpid()}")
            try:
                os.mkdir(path)
                with open(os.path.join(path, "cgroup.procs"), "w") as f:
                    f.write(str(proc.pid))
                if not os.path.exists(os.path.join(path, knob)):
                    raise OSError("no freezer here")
            except OSError:
                self._leave(root, path)
                continue
            self.root, self.path, self.knob, self.on, self.off = root, path, knob, on, off
            break
        self.how = "cgroup freezer" if self.path else "SIGSTOP (no cgroup freezer writable: Textual repaints after each SIGCONT)"

    def _write(self, value: str) -> None:
        with open(os.path.join(self.path, self.knob), "w") as f:
            f.write(value)

    def suspend(self) -> None:
        if self.path is None:
            return self.proc.suspend()
        self._write(self.on)

    def resume(self) -> None:
        if self.path is None:
            return self.proc.resume()
        self._write(self.off)

    def stopped(self) -> bool:
        """Whether the process is stopped now (its CPU time does not move either way)."""
        if self.path is None:
            return self.proc.status() == psutil.STATUS_STOPPED
        if self.knob == "freezer.state":
            with open(os.path.join(self.path, self.knob)) as f:
                return f.read().strip() == "FROZEN"
        with open(os.path.join(self.path, "cgroup.events")) as f:
            return "frozen 1" in f.read()

    def close(self) -> None:
        if self.path is None:
            return
        try:
            self.resume()
        except OSError:
            pass
        self._leave(self.root, self.path)

    def _leave(self, root: str, path: str) -> None:
        try:
            with open(os.path.join(root, "cgroup.procs"), "w") as f:
                f.write(str(self.proc.pid))
        except OSError:
            pass
        try:
            os.rmdir(path)
        except OSError:
            pass


class Members:
    """Follows the journal from a remembered offset: member -> elapsed."""

    def __init__(self, path):
        self.path, self.offset, self.rest, self.elapsed = path, 0, b"", {}

    def poll(self) -> int:
        try:
            with open(self.path, "rb") as f:
                f.seek(self.offset)
                data = f.read()
        except OSError:
            return 0
        self.offset += len(data)
        *lines, self.rest = (self.rest + data).split(b"\n")
        for line in lines:
            ev = json.loads(line)
            if ev.get("event") == "member":
                self.elapsed[ev["member"]] = float(ev["elapsed"])
        return max(self.elapsed, default=0)


def cpu_of(procs) -> float:
    total = 0.0
    for p in procs:
        try:
            c = p.cpu_times()
            total += c.user + c.system + c.children_user + c.children_system
        except psutil.NoSuchProcess:
            pass
    return total


def wait_for(members: Members, m: int, proc) -> None:
    while members.poll() < m:
        if proc.poll() is not None:
            raise SystemExit(f"the job ended early ({proc.returncode}): {proc.stderr.read().strip()}")
        time.sleep(0.05)


def main(windows=100, per=300, hog=None, settle=50):
    if not shutil.which("tmux"):
        sys.exit("tmux is needed to attach a real dashboard")
    print(time.strftime("%Y-%m-%d"), os.uname().machine, f"{os.cpu_count()} cores, "
          f"load average {os.getloadavg()[0]:.2f}; dashboard niceness +{os.environ.get('BAGGR_DASHBOARD_NICE', '10')}")
    with tempfile.TemporaryDirectory() as tmp:
        X, y = twonorm(100_000, seed=1)
        cols = {f"x{j}": X[:, j] for j in range(X.shape[1])}
        cols["y"] = y
        data = os.path.join(tmp, "twonorm.parquet")
        pq.write_table(pa.table(cols), data)
        run_dir = os.path.join(tmp, "run")
        warm = 3 * per                        # the dashboard starts and settles before the first window
        total = warm + windows * (settle + per)
        cmd = BAGGR + ["train", data, "--target", "y", "--members", str(total), "--features-per-split", "4",
                       "--run-dir", run_dir, "--no-ui", "--estimate-only"]
        proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
        sock = ["tmux", "-L", f"baggr-bench-{os.getpid()}"]
        members = Members(os.path.join(run_dir, "journal.jsonl"))
        spans = []
        freezer = None
        try:
            wait_for(members, 1, proc)
            # not exec'd: tmux continues a stopped pane process at once, so the one stopped is the
            # shell's child (tmux does not watch it)
            what = f"{sys.executable} -m tui {run_dir}" if hog is None else f"{sys.executable} -c '{HOG.format(s=hog)}'"
            subprocess.run(sock + ["new-session", "-d", "-s", "b", "-x", "120", "-y", "40", f"{what}; exit"],
                           check=True)
            pane = int(subprocess.run(sock + ["list-panes", "-t", "b", "-F", "#{pane_pid}"],
                                      capture_output=True, text=True).stdout.split()[0])
            server = int(subprocess.run(sock + ["display-message", "-p", "#{pid}"],
                                        capture_output=True, text=True).stdout.split()[0])
            while not psutil.Process(pane).children():
                time.sleep(0.01)
            dash = psutil.Process(pane).children()[0]
            freezer = Freezer(dash)
            print(f"stopping the dashboard with: {freezer.how}")
            tmux, job = psutil.Process(server), psutil.Process(proc.pid)
            wait_for(members, warm, proc)
            start_up = cpu_of([dash])
            for w in range(windows):
                start = warm + w * (settle + per)
                lo, hi = start + settle, start + settle + per
                running = w % 2 == 1
                (freezer.resume if running else freezer.suspend)()
                if not running:
                    time.sleep(0.05)
                    if not freezer.stopped():
                        raise SystemExit("the dashboard did not stop: the comparison would be void")
                wait_for(members, lo, proc)
                c0, s0, j0, t0 = cpu_of([dash]), cpu_of([tmux]), cpu_of([job]), time.perf_counter()
                wait_for(members, hi, proc)
                wall = time.perf_counter() - t0
                e = members.elapsed
                spans.append((running, (e[hi] - e[lo]) / (hi - lo), (cpu_of([dash]) - c0) / wall,
                              (cpu_of([tmux]) - s0) / wall, (cpu_of([job]) - j0) / wall))
        finally:
            try:
                if freezer is not None:
                    freezer.close()
                dash.resume()
            except Exception:
                pass
            subprocess.run(sock + ["kill-server"], check=False, capture_output=True)
            proc.terminate()
            proc.wait()
    ratios = []
    for i, (running, t, *_) in enumerate(spans):
        if running:
            around = [spans[j][1] for j in (i - 1, i + 1) if 0 <= j < len(spans) and not spans[j][0]]
            ratios.append(t / statistics.mean(around))
    alone = [s[1] for s in spans if not s[0]]
    shares = [s[2] for s in spans if s[0]]
    frozen_cpu = max((s[2] for s in spans if not s[0]), default=0.0)
    tmuxes = [s[3] for s in spans if s[0]]
    job_alone = [s[4] for s in spans if not s[0]]
    print(f"stopped windows: {statistics.median(alone) * 1e3:.2f} ms/member median "
          f"({min(alone) * 1e3:.2f}-{max(alone) * 1e3:.2f}); the job used {statistics.median(job_alone) * 100:.0f}% "
          f"of one core of {os.cpu_count()}")
    print(f"R1, {len(ratios)} running windows of {per} members (each after {settle} unmeasured) against the stopped ones beside them: "
          f"median {(statistics.median(ratios) - 1) * 100:+.1f}%, mean {(statistics.mean(ratios) - 1) * 100:+.1f}% "
          f"(standard error {statistics.stdev(ratios) / len(ratios) ** 0.5 * 100:.1f}%), "
          f"quartiles {(statistics.quantiles(ratios, n=4)[0] - 1) * 100:+.1f}% / "
          f"{(statistics.quantiles(ratios, n=4)[2] - 1) * 100:+.1f}%")
    print(f"dashboard CPU in the stopped windows: at most {frozen_cpu * 100:.2f}% of one core")
    print(f"CPU while running, of one core: dashboard {statistics.median(shares) * 100:.1f}%, tmux server "
          f"{statistics.median(tmuxes) * 100:.1f}%; dashboard start-up to {warm} members: {start_up:.2f} s of CPU")


if __name__ == "__main__":
    args = sys.argv[1:]
    opts = {}
    for flag, kind in (("--hog", float), ("--settle", int)):
        if flag in args:
            i = args.index(flag)
            opts[flag[2:]] = kind(args[i + 1])
            del args[i:i + 2]
    main(*(int(v) for v in args), **opts)
