"""The real dashboard in tmux, driven as a person over SSH would: keys in, screen text out."""
from __future__ import annotations

import os
import re
import shlex
import shutil
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import psutil
import pytest

ROOT = Path(__file__).resolve().parents[1]
TMUX = shutil.which("tmux") or ("/usr/bin/tmux" if os.path.exists("/usr/bin/tmux") else None)

pytestmark = pytest.mark.skipif(TMUX is None, reason="tmux is not installed (apt-get install tmux)")

# A stand-in job: journals a start line with its own pid, a member every 50 ms, and on a stop
# request ends with a "stopped" line, as the training loop does (see the run-directory notes).
JOB = textwrap.dedent("""
    import sys, time
    from pathlib import Path
    from baggr.runs.journal import JournalWriter, stop_requested
    from tui.fake import member_fields, start_fields
    run = Path(sys.argv[1])
    with JournalWriter(run / "journal.jsonl") as w:
        w.write("start", **start_fields(members_target=100000))
        for m in range(1, 100001):
            if stop_requested(run):
                w.write("checkpoint", member=m - 1)
                w.write("end", status="stopped", reason="stop requested", member=m - 1, elapsed=0.05 * m)
                break
            w.write("member", **member_fields(m))
            time.sleep(0.05)
""")


class Tmux:
    """One tmux server on its own socket, so no other session is ever touched."""

    def __init__(self, name: str):
        self.base = [TMUX, "-L", name]

    def __call__(self, *args, check=True) -> str:
        return subprocess.run(self.base + list(args), capture_output=True, text=True, check=check).stdout

    def screen(self) -> str:
        return self("capture-pane", "-p", "-t", "dash")

    def wait_for(self, *words, timeout: float = 30.0) -> str:
        """The screen once it shows every word (a generous deadline, not a timing check)."""
        deadline = time.monotonic() + timeout
        while True:
            text = self.screen()
            if all(w in text for w in words):
                return text
            if time.monotonic() > deadline:
                raise AssertionError(f"the screen never showed {words}:\n{text}")
            time.sleep(0.1)

    def alive(self) -> bool:
        return subprocess.run(self.base + ["has-session", "-t", "dash"], capture_output=True).returncode == 0


def test_dashboard_in_tmux(tmp_path):
    run_dir = tmp_path / "nu"
    run_dir.mkdir()
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    env.pop("NO_COLOR", None)
    job = subprocess.Popen([sys.executable, "-c", JOB, str(run_dir)], cwd=ROOT, env=env)
    tmux = Tmux(f"baggr-test-{os.getpid()}")
    try:
        cmd = f"cd {shlex.quote(str(ROOT))} && PYTHONPATH={shlex.quote(str(ROOT))} " \
              f"{shlex.quote(sys.executable)} -m tui {shlex.quote(str(run_dir))}"
        tmux("new-session", "-d", "-s", "dash", "-x", "100", "-y", "30", cmd)
        text = tmux.wait_for("of 100,000", "running", "by class")
        pane_pid = int(tmux("list-panes", "-t", "dash", "-F", "#{pane_pid}").split()[0])
        assert "members axis: linear" in text and "running · pid" in text

        tmux("send-keys", "-t", "dash", "l")
        tmux.wait_for("members axis: log")
        tmux("send-keys", "-t", "dash", "c")
        tmux.wait_for("members axis: log")          # the class highlight has no words: it must not break
        tmux("send-keys", "-t", "dash", "?")
        tmux.wait_for("keys", "leave the dashboard")
        tmux("send-keys", "-t", "dash", "Escape")
        deadline = time.monotonic() + 10
        while "leave the dashboard" in tmux.screen() and time.monotonic() < deadline:
            time.sleep(0.1)
        assert "leave the dashboard" not in tmux.screen()

        tmux("send-keys", "-t", "dash", "s")
        tmux.wait_for("stop the job?", "the job is at")
        assert not (run_dir / "stop").exists()      # asked first, nothing written yet
        tmux("send-keys", "-t", "dash", "y")
        deadline = time.monotonic() + 10
        while not (run_dir / "stop").exists() and time.monotonic() < deadline:
            time.sleep(0.05)
        assert (run_dir / "stop").exists()
        # The job sees it, ends cleanly, and the dashboard says so.
        assert job.wait(timeout=30) == 0
        tmux.wait_for("stopped on request")

        tmux("send-keys", "-t", "dash", "q")
        deadline = time.monotonic() + 15
        while tmux.alive() and time.monotonic() < deadline:
            time.sleep(0.1)
        assert not tmux.alive()                      # the command ended, so did its session
        assert not psutil.pid_exists(pane_pid) or psutil.Process(pane_pid).status() == psutil.STATUS_ZOMBIE
    finally:
        if job.poll() is None:
            job.kill()
            job.wait()
        tmux("kill-server", check=False)


def start_job(run_dir) -> subprocess.Popen:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.Popen([sys.executable, "-c", JOB, str(run_dir)], cwd=ROOT, env=env)


def in_pane(command: str) -> str:
    """A pane command that runs `command`, then says its exit code and keeps the pane open to be read."""
    return f"cd {shlex.quote(str(ROOT))} && PYTHONPATH={shlex.quote(str(ROOT))} {command}; echo \"exit=$?\"; sleep 300"


def joined(tmux) -> str:
    """The pane's text with wrapped lines joined, as the program wrote them."""
    return tmux("capture-pane", "-p", "-J", "-t", "dash")


def test_ctrl_c_leaves_the_dashboard_and_the_job_goes_on_at_80x24(tmp_path):
    # Ctrl-C showed the framework's "press ctrl+q" notice; the README says it leaves, the job going on.
    run_dir = tmp_path / "omega"
    run_dir.mkdir()
    job = start_job(run_dir)
    tmux = Tmux(f"baggr-test-c-{os.getpid()}")
    try:
        deadline = time.monotonic() + 30
        while not (run_dir / "journal.jsonl").exists():      # a run directory once the job has written
            assert time.monotonic() < deadline and job.poll() is None, "the stand-in job did not start"
            time.sleep(0.05)
        cmd = f"{shlex.quote(sys.executable)} -m baggr.cli watch {shlex.quote(str(run_dir))}"
        tmux("new-session", "-d", "-s", "dash", "-x", "80", "-y", "24", in_pane(cmd))
        tmux.wait_for("of 100,000", "running · pid", "by class")
        tmux("send-keys", "-t", "dash", "C-c")
        deadline = time.monotonic() + 60
        while "exit=" not in joined(tmux) and time.monotonic() < deadline:
            time.sleep(0.1)
        text = joined(tmux)
        assert "exit=0" in text and "ctrl+q" not in text
        said = [ln for ln in text.splitlines() if ln.startswith("left the dashboard")]
        assert len(said) == 1                                  # one line: the job goes on, and how to stop it
        assert f"the job goes on (pid {job.pid})" in said[0] and f"baggr stop {run_dir}" in said[0]
        assert job.poll() is None and not (run_dir / "stop").exists()
    finally:
        if job.poll() is None:
            job.kill()
            job.wait()
        tmux("kill-server", check=False)


def test_foreground_progress_line_keeps_the_bar_the_count_and_the_error_at_80x24(tmp_path):
    # At 80 columns the line read "training OOB error 0.1395 ... le…": no bar, no member count.
    import pyarrow as pa
    import pyarrow.csv as pacsv
    sys.path.insert(0, str(ROOT / "tests"))
    from generators import noisy_halves
    data = tmp_path / "halves.csv"
    pacsv.write_csv(pa.table(noisy_halves(3000, seed=3)), data)
    run_dir = tmp_path / "fg"
    tmux = Tmux(f"baggr-test-f-{os.getpid()}")
    try:
        cmd = (f"{shlex.quote(sys.executable)} -m baggr.cli train {shlex.quote(str(data))} --target label "
               f"--members 600 --threads 2 --foreground --run-dir {shlex.quote(str(run_dir))}")
        tmux("new-session", "-d", "-s", "dash", "-x", "80", "-y", "24", in_pane(cmd))
        seen = []
        deadline = time.monotonic() + 240
        while time.monotonic() < deadline:
            text = tmux.screen()
            seen += [ln for ln in text.splitlines() if "/600" in ln]
            if "exit=" in text:
                break
            time.sleep(0.2)
        assert "exit=0" in tmux.screen() and "finished: 600 members" in tmux.screen()
        assert seen and any("600/600" in ln for ln in seen)
        for ln in seen:                                        # mid-run and final lines alike
            assert len(ln.rstrip()) <= 80 and "…" not in ln
            done = re.search(r"\b([\d,]+)/600\b", ln)
            assert "━" in ln and done
            if done.group(1) != "0":                           # before the first member there is no error yet
                assert re.search(r"OOB error \d+\.\d\d%", ln), ln
    finally:
        tmux("kill-server", check=False)
