"""The real dashboard in tmux, driven as a person over SSH would: keys in, screen text out."""
from __future__ import annotations

import os
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
        assert "members axis: linear" in text and "job process" in text

        tmux("send-keys", "-t", "dash", "l")
        tmux.wait_for("members axis: log")
        tmux("send-keys", "-t", "dash", "c")
        tmux.wait_for("members axis: log")          # the class highlight has no words: it must not break
        tmux("send-keys", "-t", "dash", "?")
        tmux.wait_for("Keys", "leave the dashboard")
        tmux("send-keys", "-t", "dash", "Escape")
        deadline = time.monotonic() + 10
        while "leave the dashboard" in tmux.screen() and time.monotonic() < deadline:
            time.sleep(0.1)
        assert "leave the dashboard" not in tmux.screen()

        tmux("send-keys", "-t", "dash", "s")
        tmux.wait_for("Stop the job at")
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
