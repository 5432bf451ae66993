"""The Textual dashboard of a baggr run directory (reads the journal; never calls the engine)."""
import time


def watch(run_dir, *, get_time=time.time) -> int:
    """Show the dashboard of a run directory until `q`; returns the exit code (0).

    Blocks. Raises baggr.journal.RunDirError when run_dir is not a directory.
    """
    from pathlib import Path

    from baggr.journal import RunDirError

    if not Path(run_dir).is_dir():
        raise RunDirError(f"no run directory at {run_dir}")
    # Start reading a long journal before Textual is even imported: the two then share the machine's cores.
    from .opening import Opening
    opening = Opening(run_dir)
    from .app import watch as _watch
    return _watch(run_dir, get_time=get_time, opening=opening)


__all__ = ["watch"]
