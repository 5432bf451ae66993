"""The `baggr` command: train, resume, watch, stop, report, predict and demo, each one call into the library."""
from __future__ import annotations

import argparse
import json
import os
import shutil
import sys
import textwrap
import time
import traceback
from pathlib import Path

from baggr.errors import BaggrError, ConfigError

COMMANDS = ("train", "resume", "watch", "stop", "report", "predict", "demo")


# ---------------------------------------------------------------- parsing

class Parser(argparse.ArgumentParser):
    """argparse that reports a usage mistake in one line (exit 2), like every other user error."""

    def error(self, message):
        message = message.replace(", '_job'", "")  # the detached job's own entry is not for people
        sys.stderr.write(f"baggr: error: {message} (see: {self.prog} --help)\n")
        sys.exit(2)


def _features_per_split(text: str):
    if text in ("sqrt", "log2"):
        return text
    try:
        return int(text)
    except ValueError:
        pass
    try:
        return float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected sqrt, log2, a whole number or a fraction, got {text!r}") from None


def _example(text: str) -> str:
    return "example:\n" + textwrap.indent(textwrap.dedent(text).strip(), "  ")


def build_parser() -> Parser:
    common = Parser(add_help=False)
    common.add_argument("--debug", action="store_true", help="show a traceback with any error")
    ui = Parser(add_help=False)
    ui.add_argument("--no-ui", action="store_true", help="train in this process, printing plain progress lines")
    ui.add_argument("--foreground", action="store_true",
                    help="train in this process with a progress bar (Ctrl-C stops and saves)")

    settings = Parser(add_help=False)
    g = settings.add_argument_group("ensemble settings")
    g.add_argument("--members", type=int, default=100, help="number of members (trees) to grow (default 100)")
    g.add_argument("--features-per-split", type=_features_per_split, default=None, metavar="K",
                   help="features tried at each split: sqrt, log2, a whole number or a fraction "
                        "(default sqrt for classes, 1/3 for regression)")
    g.add_argument("--min-leaf", type=int, default=1, help="fewest in-bag draws in a leaf (default 1)")
    g.add_argument("--depth-limit", type=int, default=None, metavar="D", help="deepest level (default: no limit)")
    g.add_argument("--draw", choices=("bootstrap", "balanced", "subsample"), default="bootstrap",
                   help="how each member draws its rows (default bootstrap)")
    g.add_argument("--draw-fraction", type=float, default=0.632, metavar="F",
                   help="share of rows drawn by --draw subsample (default 0.632)")
    g.add_argument("--bins", type=int, default=255, help="value bins per numeric feature, 2..255 (default 255)")
    g.add_argument("--task", choices=("classes", "regression"), default=None,
                   help="default: text, whole numbers and true/false are classes; other numbers regression")
    g.add_argument("--vote", choices=("hard", "shares"), default="hard", help="how members vote (default hard)")
    g.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    g.add_argument("--threads", type=int, default=None, help="local threads (default: all cores)")
    g.add_argument("--estimate-only", action="store_true",
                   help="drop each tree after its OOB votes: the OOB estimate without a model for scoring")
    r = settings.add_argument_group("run settings")
    r.add_argument("--stop-when-stable", action="store_true",
                   help="stop early once the OOB error has settled within its own 95%% interval "
                        "(after at least 50 members, over the last max(25, members/5) members)")
    r.add_argument("--checkpoint-every", type=int, default=None, metavar="N",
                   help="checkpoint exactly every N members (default: every 50 members or 30 s, "
                        "whichever comes first, at most every 2 s and under 2%% of the time)")
    r.add_argument("--checkpoint-seconds", type=float, default=None, metavar="S",
                   help="checkpoint at least every S seconds (default 30)")
    r.add_argument("--run-dir", default=None, metavar="DIR",
                   help="run directory to write (default runs/<data-name>-<date>-<time>)")
    r.add_argument("--force", action="store_true", help="replace an existing run directory")

    p = Parser(prog="baggr", description="Bagged tree ensembles with a live out-of-bag (OOB) estimate.",
               formatter_class=argparse.RawDescriptionHelpFormatter,
               epilog=_example("""
                   baggr demo
                   baggr train data.csv --target outcome --members 300
                   baggr report runs/data-20250101-120000""") + "\n\nrun 'baggr COMMAND --help' for a command's options")
    sub = p.add_subparsers(dest="command", metavar="{" + ",".join(COMMANDS) + "}", parser_class=Parser)
    sub.required = True
    raw = argparse.RawDescriptionHelpFormatter

    def add(name, help, example, parents=(), description=None):
        return sub.add_parser(name, help=help, description=description or help, epilog=_example(example),
                              formatter_class=raw, parents=[*parents, common])

    t = add("train", "train an ensemble on a table and write a run directory",
            "baggr train firings.csv --target outcome --members 500 --features-per-split 4",
            (settings, ui), "Train an ensemble on DATA (CSV, TSV or Parquet) and write a run directory: its "
            "config, a journal line per member, checkpoints and the model. On a terminal the job runs "
            "detached (a dropped SSH link does not end it) and the dashboard attaches; leave the dashboard "
            "and the job goes on (baggr watch DIR to return).")
    t.add_argument("data", metavar="DATA", help="the training table (.csv, .tsv, .txt, .parquet)")
    t.add_argument("--target", "-t", required=True, metavar="COL", help="the column to predict")
    t.set_defaults(func=cmd_train)

    rs = add("resume", "continue an interrupted run from its last checkpoint",
             "baggr resume runs/firings-20250101-120000", (ui,),
             "Continue a stopped, failed or crashed run from its last checkpoint; the result is bit-identical "
             "to a run never interrupted. The data file must be unchanged. A finished run is left as it is "
             "(exit 0).")
    rs.add_argument("dir", metavar="DIR", help="the run directory")
    rs.set_defaults(func=cmd_resume)

    w = add("watch", "attach the dashboard to a run (running or not)", "baggr watch runs/firings-20250101-120000")
    w.add_argument("dir", metavar="DIR", help="the run directory")
    w.set_defaults(func=cmd_watch)

    s = add("stop", "ask a running job to finish the member in hand, save and stop",
            "baggr stop runs/firings-20250101-120000 --wait")
    s.add_argument("dir", metavar="DIR", help="the run directory")
    s.add_argument("--wait", action="store_true", help="wait until the job has stopped")
    s.set_defaults(func=cmd_stop)

    rp = add("report", "print a run's OOB figures (finished or not)",
             "baggr report runs/firings-20250101-120000 --json > figures.json",
             description="Print a run's OOB error with its interval, per-class errors, the confusion counts, "
                         "coverage, where the curve settled, members, time, settings and the data fingerprint. "
                         "Works on a finished run (model.npz), an unfinished one (its checkpoint) or a model file.")
    rp.add_argument("dir", metavar="DIR", help="a run directory or a model file")
    rp.add_argument("--json", action="store_true", help="print one JSON object instead of tables")
    rp.set_defaults(func=cmd_report)

    pr = add("predict", "score new rows with a run's model",
             "baggr predict runs/firings-20250101-120000 new-firings.csv --out scored.parquet",
             description="Write predictions for DATA: a column 'prediction', then 'share_<class>' per class "
                         "(the share of members voting for it); regression: 'prediction' only. CSV or Parquet "
                         "by the extension of --out.")
    pr.add_argument("model", metavar="DIR_OR_MODEL", help="a run directory or a model file")
    pr.add_argument("data", metavar="DATA", help="the table to score")
    pr.add_argument("--out", "-o", required=True, metavar="FILE", help="output .csv, .tsv or .parquet")
    pr.add_argument("--force", action="store_true", help="replace an existing output file")
    pr.set_defaults(func=cmd_predict)

    d = add("demo", "train on a built-in invented scenario and print the report",
            "baggr demo --members 100", (ui,),
            "Generate an invented table (kiln firings with a rare failure class), train on it like "
            "`baggr train`, then print the report.")
    d.add_argument("--members", type=int, default=DEMO_MEMBERS, help=f"members to grow (default {DEMO_MEMBERS})")
    d.add_argument("--rows", type=int, default=DEMO_ROWS, help=f"rows of invented data (default {DEMO_ROWS})")
    d.add_argument("--seed", type=int, default=0, help="random seed of the ensemble (default 0)")
    d.add_argument("--data-seed", type=int, default=2026, help="seed of the invented data (default 2026)")
    d.add_argument("--threads", type=int, default=None, help="local threads (default: all cores)")
    d.add_argument("--run-dir", default=None, metavar="DIR", help="run directory (default runs/demo-<date>-<time>)")
    d.add_argument("--force", action="store_true", help="replace an existing run directory")
    d.set_defaults(func=cmd_demo)

    j = sub.add_parser("_job", parents=[common])      # the detached job itself; not for people
    j.add_argument("dir")
    j.add_argument("--verify", action="store_true")
    j.set_defaults(func=cmd_job)
    return p


DEMO_MEMBERS = 300
DEMO_ROWS = 6000


# ---------------------------------------------------------------- helpers

def _config(args):
    from baggr.config import Config
    return Config(members=args.members, features_per_split=args.features_per_split, min_leaf=args.min_leaf,
                  depth_limit=args.depth_limit, bins=args.bins, draw=args.draw, draw_fraction=args.draw_fraction,
                  vote=args.vote, task=args.task, seed=args.seed, threads=args.threads,
                  keep_members=not args.estimate_only)


def _settings(args):
    from baggr.runs import RunSettings
    s = RunSettings(stop_when_stable=bool(getattr(args, "stop_when_stable", False)))
    every, seconds = getattr(args, "checkpoint_every", None), getattr(args, "checkpoint_seconds", None)
    if every is not None:
        if every < 1:
            raise ConfigError(f"--checkpoint-every must be a whole number >= 1, got {every}")
        s.checkpoint_members, s.checkpoint_budget = every, None
        s.checkpoint_seconds = float("inf") if seconds is None else seconds
    if seconds is not None:
        if not seconds > 0:
            raise ConfigError(f"--checkpoint-seconds must be above 0, got {seconds}")
        s.checkpoint_seconds = seconds
    if s.checkpoint_seconds == float("inf"):
        s.checkpoint_seconds = 1e12   # strict JSON in config.json has no infinity
    return s


def _mode(args) -> str:
    """'detached' (terminal: job in its own session + dashboard), 'rich' (progress bar here) or 'plain'."""
    tty = sys.stdout.isatty()
    if getattr(args, "no_ui", False):
        return "plain"
    if getattr(args, "foreground", False):
        return "rich" if tty else "plain"
    return "detached" if tty else "plain"


def _say(text: str = "") -> None:
    try:
        print(text, flush=True)
    except OSError:   # stdout gone (terminal closed): nothing to tell
        pass


def _discard(rd) -> None:
    """Remove a run directory this command made, when its job could not even start (bad input)."""
    shutil.rmtree(rd.path, ignore_errors=True)


class _Announced:
    """A progress display that first prints one line (the run directory) when the job has started:
    a start that fails removes a new run directory, whose path should then never have been shown."""

    def __init__(self, inner, line: str):
        self.inner, self.line = inner, line

    def begin(self, start: dict) -> None:
        if self.line is not None:
            _say(self.line)
            self.line = None
        self.inner.begin(start)

    def __getattr__(self, name):
        return getattr(self.inner, name)


def _launch(rd, mode: str, *, fresh: bool, announce: str | None = None) -> int:
    """Run the job of rd in the chosen mode; returns the exit code. announce: a line to print
    first, once the job has started."""
    if mode == "detached":
        return _detached(rd, fresh=fresh, announce=announce)
    from baggr.cli import progress as prog
    from baggr.runs import Job
    bar = prog.make(mode)
    if announce is not None:
        bar = _Announced(bar, announce)
    job = Job(rd, bar, verify=False)
    try:
        out = job.run()
    except BaggrError:
        if fresh and not job.started:
            _discard(rd)
        raise
    finally:
        bar.close()
    _say(out.message)
    return out.code


def _detached(rd, *, fresh: bool, announce: str | None = None) -> int:
    from baggr import runs
    pid = rd.lock_holder()
    if pid:
        raise runs.RunDirError(f"{rd.path} is already running (pid {pid}); watch it with: baggr watch {rd.path}")
    st, _ = rd.state()
    proc = runs.spawn(rd)
    from rich.console import Console
    console = Console()
    try:
        with console.status(f"reading the data (job pid {proc.pid}) ..."):
            code = runs.wait_started(rd, proc, st.starts)
    except KeyboardInterrupt:
        _say(f"left the job starting in the background (pid {proc.pid}); reattach with: baggr watch {rd.path}")
        return 0
    if code is not None:
        line = runs.job_error_line(rd) or f"baggr: error: the job ended before it started (exit {code}; see {rd / runs.JOB_LOG})"
        sys.stderr.write(line + "\n")
        if fresh and code == 2:
            _discard(rd)
        return code if code else 2
    if announce is not None:
        _say(announce)
    _attach(rd)
    return _after_watching(rd)


def _after_watching(rd) -> int:
    """One line on leaving the dashboard: where the job stands and what to do next."""
    from baggr.runs import JOB_LOG
    st, status = rd.state()
    if status == "running":
        _say(f"the job goes on in the background (pid {st.pid}); reattach with: baggr watch {rd.path}")
        return 0
    if status == "failed":
        sys.stderr.write(f"baggr: error: the job failed at {st.members} members: {st.reason}\n")
        return 2
    if status == "crashed":
        sys.stderr.write(f"baggr: error: the job ended without a word at {st.members} members (see {rd / JOB_LOG}); "
                         f"continue with: baggr resume {rd.path}\n")
        return 2
    _say(f"{status} at {st.members} members ({st.reason}); the figures: baggr report {rd.path}")
    return 0


def _attach(rd) -> int:
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


# ---------------------------------------------------------------- commands

def cmd_train(args) -> int:
    from baggr import runs
    config, settings = _config(args), _settings(args)
    info = runs.fingerprint(args.data)
    rd = runs.create(args.run_dir or runs.default_run_dir(args.data), force=args.force)
    try:
        runs.init_config(rd, data=info, target=args.target, config=config, settings=settings)
    except BaggrError:
        _discard(rd)
        raise
    # the run directory is the first line, printed once the job has started (a start that fails
    # removes the directory)
    return _launch(rd, _mode(args), fresh=True, announce=str(rd.path))


def cmd_resume(args) -> int:
    from baggr import runs
    rd = runs.RunDir(args.dir).require()
    cfg = rd.read_config()
    st, status = rd.state()
    pid = rd.lock_holder()
    if pid or status == "running":
        raise runs.RunDirError(f"{rd.path} is already running (pid {pid or st.pid}); "
                               f"watch it with: baggr watch {rd.path}")
    if st.status == "finished" and (rd / runs.MODEL).exists():
        _say(f"{rd.path} is finished ({st.members} members; {st.reason}); nothing to resume")
        return 0
    runs.check_data(cfg["data"])
    return _launch(rd, _mode(args), fresh=False)


def cmd_job(args) -> int:
    from baggr.cli import progress as prog
    from baggr.runs import Job, RunDir
    job = Job(RunDir(args.dir), prog.PlainProgress(sys.stdout), verify=args.verify)
    out = job.run()
    _say(out.message)
    return out.code


def cmd_watch(args) -> int:
    from baggr.runs import RunDir
    rd = RunDir(args.dir).require()
    code = _attach(rd)
    st, status = rd.state()
    if status == "running":
        _say(f"the job goes on (pid {st.pid}); reattach with: baggr watch {rd.path}")
    return code


def cmd_stop(args) -> int:
    from baggr.runs import journal
    from baggr.runs import RunDir, RunDirError
    rd = RunDir(args.dir).require()
    st, status = rd.state()
    if status != "running":
        raise RunDirError(f"no job is running in {rd.path} (it is {status})")
    journal.request_stop(rd.path)
    _say(f"asked the job (pid {st.pid}) to stop after the member in hand")
    if args.wait:
        while rd.state()[1] == "running":
            time.sleep(0.2)
        st, status = rd.state()
        _say(f"{status} at {st.members} members ({st.reason})")
    return 0


def cmd_report(args) -> int:
    from baggr.cli import report
    r = report.load(args.dir)
    if args.json:
        _say(json.dumps(report.figures(r), allow_nan=False))
        return 0
    from rich.console import Console
    report.render(r, Console())
    return 0


OUT_KINDS = {".csv": "csv", ".tsv": "tsv", ".parquet": "parquet", ".pq": "parquet"}


def cmd_predict(args) -> int:
    import numpy as np
    import pyarrow as pa

    from baggr import data
    from baggr.model import ensemble as model
    from baggr.errors import ModelFileError
    from baggr.runs import MODEL, RunDir, RunDirError
    src = Path(args.model)
    path = src / MODEL if src.is_dir() else src
    if src.is_dir() and not path.exists():
        rd = RunDir(src).require()
        st, status = rd.state()
        raise RunDirError(f"{src} has no model yet (the run is {status} at {st.members} members): "
                          "wait for it to finish, or stop it (baggr stop DIR) to save one")
    if not path.exists():
        raise ModelFileError(f"model file not found: {path}")
    out = Path(args.out)
    kind = OUT_KINDS.get(out.suffix.lower())
    if kind is None:
        raise ConfigError(f"--out must end in .csv, .tsv, .parquet or .pq, got {out.name!r}")
    if (out.exists() or out.is_symlink()) and not args.force:
        raise BaggrError(f"{out} already exists (use --force to replace it)")
    if not out.parent.resolve().is_dir():
        raise BaggrError(f"cannot write {out}: folder {out.parent} does not exist")
    ens = model.load(path)
    X = data.read_table(args.data)
    cols = {}
    if ens.task == "classes":
        shares = ens.vote_shares(X)
        cols["prediction"] = pa.array([ens.classes[k] for k in np.argmax(shares, axis=1)])
        for k, c in enumerate(ens.classes):
            cols[f"share_{c}"] = pa.array(shares[:, k])
    else:
        cols["prediction"] = pa.array(np.asarray(ens.predict(X), dtype=np.float64))
    _write_table(pa.table(cols), out, kind)
    _say(f"wrote {len(cols['prediction'])} predictions to {out}")
    return 0


def _write_table(table, out: Path, kind: str) -> None:
    """Write via a temp file and rename: a failed write never leaves half a file under the asked name."""
    import tempfile
    fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=out.suffix, dir=out.parent.resolve())
    os.close(fd)
    try:
        if kind == "parquet":
            import pyarrow.parquet as pq
            pq.write_table(table, tmp)
        else:
            import pyarrow.csv as pacsv
            opts = pacsv.WriteOptions(delimiter="\t" if kind == "tsv" else ",")
            pacsv.write_csv(table, tmp, write_options=opts)
        os.replace(tmp, out)
    except OSError as e:
        raise BaggrError(f"cannot write {out}: {e.strerror or e}") from None
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)


def cmd_demo(args) -> int:
    from baggr.cli import report
    from baggr import runs
    from baggr.config import Config
    try:
        from demo import scenario
    except ImportError as e:
        raise BaggrError(f"the demo scenario is not installed ({e})") from None
    config = Config(members=args.members, seed=args.seed, threads=args.threads)
    if isinstance(args.rows, int) and args.rows < 50:
        raise ConfigError(f"--rows must be at least 50 for a demo, got {args.rows}")
    rd = runs.create(args.run_dir or runs.default_run_dir("demo"), force=args.force)
    mode = _mode(args)
    try:
        _say("\n".join(textwrap.wrap(scenario.DESCRIPTION, 88)))
        _say()
        _say(str(rd.path))
        path = scenario.write(rd / "demo-data.csv", rows=args.rows, seed=args.data_seed)
        info = runs.fingerprint(path)
        runs.init_config(rd, data=info, target=scenario.TARGET, config=config, settings=runs.RunSettings())
    except BaggrError:
        _discard(rd)
        raise
    code = _launch(rd, mode, fresh=True)
    st, status = rd.state()
    if code == 0 and status in ("finished", "stopped"):
        from rich.console import Console
        _say()
        report.render(report.load(rd.path), Console())
        _say()
        _say(f"next: baggr report {rd.path} --json   |   "
             f"baggr predict {rd.path} {rd / 'demo-data.csv'} --out scored.csv")
    return code


# ---------------------------------------------------------------- entry point

def main(argv=None) -> int:
    """Run the command line; returns the exit code (2: a user error, 1: an internal error)."""
    args = build_parser().parse_args(argv)
    debug = getattr(args, "debug", False)
    try:
        return int(args.func(args) or 0)
    except BaggrError as e:
        if debug:
            traceback.print_exc()
        sys.stderr.write(f"baggr: error: {e}\n")
        return 2
    except KeyboardInterrupt:
        sys.stderr.write("baggr: interrupted\n")
        return 130
    except Exception as e:   # noqa: BLE001 - the last line of defence: one line unless --debug
        if debug:
            traceback.print_exc()
        msg = str(e).strip().splitlines()[0] if str(e).strip() else ""
        sys.stderr.write(f"baggr: internal error: {type(e).__name__}{': ' + msg if msg else ''} "
                         "(run with --debug for details)\n")
        return 1


if __name__ == "__main__":
    sys.exit(main())
