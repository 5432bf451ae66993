"""The Textual dashboard of a baggr run directory (reads the journal; never calls the engine)."""
import os
import time

# The dashboard yields the CPU to the job it watches: on a server whose cores the job fills, a
# redraw then waits for a gap rather than taking a share of the job's time (bench/README.md).
NICE = 10


def lower_priority() -> None:
    """Raise this process's niceness by BAGGR_DASHBOARD_NICE (default NICE; 0 leaves it)."""
    try:
        step = int(os.environ.get("BAGGR_DASHBOARD_NICE", NICE))
    except ValueError:
        step = NICE
    if os.environ.get("BAGGR_DASHBOARD_SCHED") == "idle" and hasattr(os, "SCHED_IDLE"):
        try:
            os.sched_setscheduler(0, os.SCHED_IDLE, os.sched_param(0))
            return
        except OSError:
            pass
    if step > 0 and hasattr(os, "nice"):
        try:
            os.nice(step)
        except OSError:
            pass


def needs_terminal(run_dir) -> None:
    """Refuse, in one line, to draw on output or read keys from input that is not a terminal: the
    dashboard would write full-screen escape codes into a pipe and wait for keys that never come."""
    import sys

    from baggr.runs.journal import RunDirError

    for name, stream in (("output", sys.stdout), ("input", sys.stdin)):
        try:
            tty = stream is not None and stream.isatty()
        except (AttributeError, ValueError, OSError):     # closed or replaced by something without a terminal
            tty = False
        if not tty:
            raise RunDirError(f"the dashboard needs a terminal and this {name} is not one; "
                              f"for the figures as text: baggr report {run_dir}")


def watch(run_dir, *, get_time=time.time) -> int:
    """Show the dashboard of a run directory until `q` or Ctrl-C; returns the exit code (0).

    Blocks. Raises baggr.journal.RunDirError when run_dir is not a directory, or when output or
    input is not a terminal.
    """
    from pathlib import Path

    from baggr.runs.journal import RunDirError

    if not Path(run_dir).is_dir():
        raise RunDirError(f"no run directory at {run_dir}")
    needs_terminal(run_dir)
    # Start reading a long journal before Textual is even imported: the two then share the machine's cores.
    from .opening import Opening
    opening = Opening(run_dir)
    lower_priority()        # after the opening read started: it keeps the normal priority
    from .app import watch as _watch
    return _watch(run_dir, get_time=get_time, opening=opening)


def watch_comparison(path) -> int:
    """The board of a comparison directory (every candidate's curve, the ranked table) until `q`."""
    from .compare import watch_comparison as _watch
    return _watch(path)


__all__ = ["watch", "watch_comparison"]
