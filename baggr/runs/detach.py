"""The detached job: started as its own process (a dropped SSH link does not end it), waited for
until it has begun, and what it said in job.log when it failed.
"""
from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

from baggr.runs.files import JOB_LOG, JOURNAL, write_error
from baggr.runs.journal_reader import JournalReader
from baggr.runs.rundir import RunDir


def spawn(rd: RunDir, *, verify: bool = False, cluster: str | None = None) -> subprocess.Popen:
    """Start the job as its own process in its own session (a dropped SSH link does not end it);
    cluster: grow its members there (an address or local:N)."""
    pkg_root = str(Path(__file__).resolve().parents[2])   # the folder holding baggr/
    env = dict(os.environ)
    env["PYTHONPATH"] = pkg_root + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    args = [sys.executable, "-m", "baggr.cli", "_job", str(rd.path)]
    if verify:
        args.append("--verify")
    if cluster is not None:
        args += ["--cluster", cluster]
    try:
        log = open(rd / JOB_LOG, "ab")
    except OSError as e:
        raise write_error("the job log", rd / JOB_LOG, e) from None
    with log:
        return subprocess.Popen(args, start_new_session=True, stdin=subprocess.DEVNULL, stdout=log,
                                stderr=subprocess.STDOUT, env=env, close_fds=True)


def wait_started(rd: RunDir, proc: subprocess.Popen, starts_before: int, poll=0.1, on_wait=None,
                 on_event=None) -> int | None:
    """Wait until the job writes a new start line (None) or exits first (its return code).

    on_event(event): called with each line of the job's before its start line (a warning, the
    note that kernels compile).
    """
    reader = JournalReader(rd / JOURNAL)
    starts = 0
    while True:
        for ev in reader.read_new():
            if ev.get("event") == "start":
                starts += 1
            elif on_event is not None and starts == starts_before:
                on_event(ev)
        if starts > starts_before:
            return None
        code = proc.poll()
        if code is not None:
            for ev in reader.read_new():
                if ev.get("event") == "start":
                    starts += 1
            return None if starts > starts_before else code
        if on_wait is not None:
            on_wait()
        time.sleep(poll)


def job_error_line(rd: RunDir) -> str | None:
    """The last "baggr: ..." line of job.log (what a failed detached job said)."""
    try:
        lines = (rd / JOB_LOG).read_text(errors="replace").splitlines()
    except OSError:
        return None
    for line in reversed(lines):
        if line.startswith("baggr:"):
            return line
    return None
