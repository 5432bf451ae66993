"""Starting a run's job and following it: detached with the dashboard attached, or in this
process with a progress bar or plain lines; what to say when the dashboard is left.
"""
from __future__ import annotations

import shutil
import sys

from baggr.errors import BaggrError


def run_mode(args) -> str:
    """'detached' (terminal: job in its own session + dashboard), 'rich' (progress bar here) or 'plain'."""
    tty = sys.stdout.isatty()
    if getattr(args, "no_ui", False):
        return "plain"
    if getattr(args, "foreground", False):
        return "rich" if tty else "plain"
    # the dashboard also reads keys: without a terminal on stdin the job runs here with plain lines
    return "detached" if tty and _isatty(sys.stdin) else "plain"


def _isatty(stream) -> bool:
    try:
        return stream is not None and stream.isatty()
    except (AttributeError, ValueError, OSError):
        return False


def say(text: str = "") -> None:
    try:
        print(text, flush=True)
    except OSError:   # stdout gone (terminal closed): nothing to tell
        pass


def discard(rd) -> None:
    """Remove a run directory this command made, when its job could not even start (bad input)."""
    shutil.rmtree(rd.path, ignore_errors=True)


class Announced:
    """A progress display that first prints one line (the run directory) when the job has started:
    a start that fails removes a new run directory, whose path should then never have been shown."""

    def __init__(self, inner, line: str):
        self.inner, self.line = inner, line

    def _announce(self) -> None:
        if self.line is not None:
            say(self.line)
            self.line = None

    def begin(self, start: dict) -> None:
        self._announce()
        self.inner.begin(start)

    def note(self, text: str) -> None:
        """A note before the start (the data was read: the run will start) comes after the line."""
        self._announce()
        self.inner.note(text)

    def __getattr__(self, name):
        return getattr(self.inner, name)


def launch(rd, mode: str, *, fresh: bool, announce: str | None = None, cluster: str | None = None,
           debug: bool = False) -> int:
    """Run the job of rd in the chosen mode; returns the exit code. announce: a line to print
    first, once the job has started; cluster: where the members grow (None: local threads)."""
    if mode == "detached":
        return detached(rd, fresh=fresh, announce=announce, cluster=cluster)
    from baggr.cli import progress as prog
    from baggr.runs import Job
    if cluster is not None and not debug:
        from baggr.backends.dask_connect import quiet_logs
        quiet_logs()     # the job says what matters in its own lines
    bar = prog.make(mode)
    if announce is not None:
        bar = Announced(bar, announce)
    job = Job(rd, bar, verify=False, cluster=cluster)
    try:
        out = job.run()
    except BaggrError:
        if fresh and not job.started:
            discard(rd)
        raise
    finally:
        bar.close()
    say(out.message)
    return out.code


def detached(rd, *, fresh: bool, announce: str | None = None, cluster: str | None = None) -> int:
    from baggr import runs
    pid = rd.lock_holder()
    if pid:
        raise runs.RunDirError(f"{rd.path} is already running (pid {pid}); watch it with: baggr watch {rd.path}")
    st, _ = rd.state()
    proc = runs.spawn(rd, cluster=cluster)
    from rich.console import Console
    console = Console()
    said = []

    def on_event(ev):
        """The job's lines before its start: the compile note and warnings, printed as they come."""
        if ev.get("event") in ("compiling", "warning") and ev.get("message"):
            if announce is not None and not said:
                console.print(announce, markup=False, highlight=False)
            said.append(ev)
            prefix = "warning: " if ev["event"] == "warning" else ""
            console.print(prefix + str(ev["message"]), markup=False, highlight=False)
            if ev["event"] == "compiling":
                status.update(f"{ev['message']} (job pid {proc.pid}) ...")

    try:
        doing = "reading the data" if cluster is None else f"connecting to the cluster ({cluster}) and reading the data"
        with console.status(f"{doing} (job pid {proc.pid}) ...") as status:
            code = runs.wait_started(rd, proc, st.starts, on_event=on_event)
    except KeyboardInterrupt:
        say(f"left the job starting in the background (pid {proc.pid}); reattach with: baggr watch {rd.path}")
        return 0
    if code is not None:
        line = runs.job_error_line(rd) or f"baggr: error: the job ended before it started (exit {code}; see {rd / runs.JOB_LOG})"
        sys.stderr.write(line + "\n")
        if fresh and code == 2:
            discard(rd)
        return code if code else 2
    if announce is not None and not said:
        say(announce)
    attach(rd)
    return after_watching(rd)


def after_watching(rd) -> int:
    """One line on leaving the dashboard: where the job stands and what to do next."""
    from baggr.runs import JOB_LOG
    st, status = rd.state()
    if status == "running":
        say(goes_on(rd, st))
        return 0
    if status == "failed":
        sys.stderr.write(f"baggr: error: the job failed at {st.members} members: {st.reason}\n")
        return 2
    if status == "crashed":
        sys.stderr.write(f"baggr: error: the job ended without a word at {st.members} members (see {rd / JOB_LOG}); "
                         f"continue with: baggr resume {rd.path}\n")
        return 2
    say(f"{status} at {st.members} members ({st.reason}); the figures: baggr report {rd.path}")
    return 0


def goes_on(rd, st) -> str:
    """The line said on leaving the dashboard (q or Ctrl-C) while the job runs: it goes on, and how to stop it."""
    return (f"left the dashboard; the job goes on (pid {st.pid}). Stop it: baggr stop {rd.path}   "
            f"watch again: baggr watch {rd.path}")


def attach(rd) -> int:
    """The dashboard on rd, or (while it cannot be imported) a progress bar following the journal."""
    import importlib.util
    try:  # find, not import: tui.watch starts reading a long journal before Textual loads
        found = importlib.util.find_spec("tui.app") is not None
    except (ImportError, ValueError):
        found = False
    watch = None
    if found:
        from tui import watch
    if watch is not None:
        return int(watch(str(rd.path)) or 0)
    from baggr.cli import progress as prog
    bar = prog.make("rich" if sys.stdout.isatty() else "plain")
    try:
        prog.follow(rd.path, bar, is_done=lambda: rd.state()[1] not in ("running", "waiting"))
    except KeyboardInterrupt:
        pass
    finally:
        bar.close()
    return 0
