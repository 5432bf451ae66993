"""How a job looks from outside: is its process alive, what is its status, and asking it to stop
(the stop file). Pure Python (psutil, loaded when a process is checked).
"""
from __future__ import annotations

import socket
from pathlib import Path

from baggr.atomic import replace_atomic
from baggr.errors import RunDirError
from baggr.runs.files import JOURNAL, STOP
from baggr.runs.run_state import RunState


def pid_alive(pid, pid_started, host=None) -> bool:
    """True when process `pid` runs and began at `pid_started` (within 1 s): the very process of the start line."""
    import psutil  # here, so writing a journal never needs it
    if pid is None:
        return False
    try:
        proc = psutil.Process(int(pid))
        if proc.status() == psutil.STATUS_ZOMBIE:
            return False
        if pid_started is not None and abs(proc.create_time() - float(pid_started)) > 1.0:
            return False           # the pid was reused by another process
        return True
    except (psutil.NoSuchProcess, ValueError, OverflowError):
        return False
    except psutil.AccessDenied:
        return True                # it exists; we may not look closer


def same_host(host) -> bool:
    return host is None or host == socket.gethostname()


def job_status(run_dir, state: RunState) -> str:
    """The job's status: the journal's word, or "crashed" when its process is gone without an end line.

    A job started on another host cannot be checked from here and keeps the journal's word.
    """
    if state.status == "waiting" and not (Path(run_dir) / JOURNAL).exists():
        return "waiting"
    if state.status != "running":
        return state.status
    if not same_host(state.host):
        return "running"
    return "running" if pid_alive(state.pid, state.pid_started) else "crashed"


def request_stop(run_dir) -> Path:
    """Ask the job to finish the member in hand, save and end ("stopped"): create the stop file."""
    run_dir = Path(run_dir)
    if not run_dir.is_dir():
        raise RunDirError(f"no run directory at {run_dir}")
    target = run_dir / STOP
    # Written under a temporary name and renamed: the job never sees a half-made file.
    replace_atomic(target, lambda f: None, durable=False)
    return target


def stop_requested(run_dir) -> bool:
    """True when a stop file waits in the run directory."""
    return (Path(run_dir) / STOP).exists()
