"""The commands of `baggr`, one function each: args in, exit code out (a BaggrError for what the user can fix)."""
from __future__ import annotations

import json
import os
import sys
import textwrap
import time
from pathlib import Path

from baggr.cli.launch import attach, discard, goes_on, launch, run_mode, say
from baggr.errors import BaggrError, ConfigError, DataError


def text_width() -> int:
    """Columns to wrap prose to: the terminal's (80 when not a terminal), at most 100, one spare."""
    import shutil
    return max(40, min(shutil.get_terminal_size((80, 24)).columns, 100) - 1)


def _config(args):
    from baggr.config import Config
    return Config(members=args.members, features_per_split=args.features_per_split, min_leaf=args.min_leaf,
                  depth_limit=args.depth_limit, bins=args.bins, draw=args.draw, draw_fraction=args.draw_fraction,
                  vote=args.vote, task=args.task, seed=args.seed, threads=args.threads,
                  keep_members=not args.estimate_only, importance=args.importance, measure=args.measure)


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


def _cluster(args) -> str | None:
    """The --cluster option, checked before anything is written (the address's form, the extra installed)."""
    text = getattr(args, "cluster", None)
    if text is None:
        return None
    from baggr.backends.dask_connect import check_option
    return check_option(text)


def cmd_train(args) -> int:
    from baggr import runs
    from baggr.cli.main import table_options
    config, settings, cluster = _config(args), _settings(args), _cluster(args)
    info = runs.fingerprint(args.data)
    rd = runs.create(args.run_dir or runs.default_run_dir(args.data), force=args.force)
    try:
        runs.init_config(rd, data=info, target=args.target, config=config, settings=settings,
                         table=table_options(args))
    except BaggrError:
        discard(rd)
        raise
    # the run directory is the first line, printed once the job has started (a start that fails
    # removes the directory)
    return launch(rd, run_mode(args), fresh=True, announce=str(rd.path), cluster=cluster, debug=args.debug)


def _comparison(path) -> bool:
    from baggr.runs.comparison import is_comparison
    return is_comparison(path)


def cmd_compare(args) -> int:
    from baggr.cli import compare
    return compare.cmd_compare(args)


def cmd_resume(args) -> int:
    from baggr import runs
    cluster = _cluster(args)
    if _comparison(args.dir):
        from baggr.cli import compare
        return compare.cmd_resume(args)
    rd = runs.RunDir(args.dir).require()
    cfg = rd.read_config()
    st, status = rd.state()
    pid = rd.lock_holder()
    if pid or status == "running":
        raise runs.RunDirError(f"{rd.path} is already running (pid {pid or st.pid}); "
                               f"watch it with: baggr watch {rd.path}")
    more = getattr(args, "members", None)
    if more is not None:
        if more <= st.members:
            raise ConfigError(f"--members {more} must be above the run's {st.members} members")
        # asked for more members: the run's target becomes N, and N is what it grows to
        cfg["config"]["members"] = more
        cfg.setdefault("run", {})["stop_when_stable"] = False
        runs.check_data(cfg["data"])
        rd.write_config(cfg)
    elif st.status == "finished" and (rd / runs.MODEL).exists():
        say(f"{rd.path} is finished ({st.members} members; {st.reason}); nothing to resume "
            f"(to grow it: baggr resume {rd.path} --members N)")
        return 0
    runs.check_data(cfg["data"])
    return launch(rd, run_mode(args), fresh=False, cluster=cluster, debug=args.debug)


def cmd_job(args) -> int:
    if _comparison(args.dir):
        from baggr.cli import compare
        return compare.cmd_job(args)
    from baggr.cli import progress as prog
    from baggr.runs import Job, RunDir
    if args.cluster is not None and not args.debug:
        from baggr.backends.dask_connect import quiet_logs
        quiet_logs()
    job = Job(RunDir(args.dir), prog.PlainProgress(sys.stdout), verify=args.verify, cluster=args.cluster)
    out = job.run()
    say(out.message)
    return out.code


def cmd_watch(args) -> int:
    if _comparison(args.dir):
        from baggr.cli import compare
        return compare.cmd_watch(args)
    from baggr.runs import RunDir
    rd = RunDir(args.dir).require()
    code = attach(rd)
    st, status = rd.state()
    if status == "running":
        say(goes_on(rd, st))
    return code


def cmd_stop(args) -> int:
    if _comparison(args.dir):
        from baggr.cli import compare
        return compare.cmd_stop(args)
    from baggr.runs import journal
    from baggr.runs import RunDir, RunDirError
    from baggr.runs import status_words
    rd = RunDir(args.dir).require()
    st, status = rd.state()
    if status != "running":
        raise RunDirError(f"no job is running in {rd.path}: {status_words(status, st.members)}")
    journal.request_stop(rd.path)
    say(f"asked the job (pid {st.pid}) to stop after the member in hand")
    if args.wait:
        while rd.state()[1] == "running":
            time.sleep(0.2)
        st, status = rd.state()
        say(f"{status} at {st.members} members ({st.reason})")
    return 0


def cmd_report(args) -> int:
    if _comparison(args.dir):
        from baggr.cli import compare
        return compare.cmd_report(args)
    from baggr.cli import outputs, report
    keep = [c.strip() for c in args.keep.split(",") if c.strip()] if args.keep else None
    if keep and not args.rows:
        raise ConfigError("--keep goes with --rows (it names columns to copy into the per-row export)")
    r = report.load(args.dir)
    if getattr(args, "measure", None):      # head the report by another measure than the run's own
        r.config = r.config.replace(measure=args.measure)     # an unknown name: ConfigError
        r.config.resolved_measure(r.task)                      # one that does not fit the task: ConfigError
    d = report.figures(r)
    files = []
    if args.rows:
        files.append(outputs.write_rows(r, Path(args.rows), keep, args.force))
    if args.html:
        files.append(outputs.write_html(r, d, Path(args.html), args.force))
    if args.figures:
        files.append(outputs.write_figures(r, d, Path(args.figures), args.force))
    if args.json:
        say(json.dumps(d, allow_nan=False))
    elif not files:
        from rich.console import Console
        report.render(r, Console(), d)
    for line in files:    # with --json, stdout holds the JSON alone
        if args.json:
            sys.stderr.write(line + "\n")
        else:
            say(line)
    return 0


def cmd_predict(args) -> int:
    from baggr.cli.main import _joined
    from baggr.data.batches import Batches
    from baggr.model import ensemble as model
    from baggr.runs import model_path
    path = model_path(args.model)
    from baggr.cli.outputs import check_new, table_kind
    out = Path(args.out)
    kind = table_kind(out)
    check_new(out, args.force)
    ens = model.load(path)
    if ens.forest is None or ens.forest.members == 0:
        raise BaggrError(f"{path} was trained with --estimate-only: it has no trees to score new rows")
    keep = _joined(args.keep)
    made = ["prediction"] + ([f"share_{c}" for c in ens.classes] if ens.task == "classes" else [])
    clash = [k for k in keep if k in made]
    if clash:
        raise BaggrError(f"--keep {clash[0]}: the output has its own column {clash[0]!r}")
    batches = Batches(args.data, ens.schema.names, ens.schema.kinds, rows=BATCH_ROWS, dates=ens.schema.dates,
                      keep=keep, delimiter=args.delimiter)
    unseen: dict = {}
    members = getattr(args, "members", None)
    if members is not None and not 1 <= members <= ens.forest.members:
        raise ConfigError(f"--members must be from 1 to {ens.forest.members} (the members the model keeps), "
                          f"got {members}")
    n = _predict_stream(ens, batches, out, kind, keep, unseen, members)
    if unseen:
        sys.stderr.write(unseen_line(unseen) + "\n")
    say(f"wrote {n} predictions to {out}")
    return 0


BATCH_ROWS = 1 << 17   # rows scored at a time: a table larger than memory streams through


def unseen_line(unseen: dict) -> str:
    """One warning line: how many values were categories the model never saw, and per column."""
    total = sum(k for k, _ in unseen.values())
    per = ", ".join(f"{name} {k}" for name, (k, _) in sorted(unseen.items(), key=lambda kv: -kv[1][0])[:5])
    more = ", ..." if len(unseen) > 5 else ""
    pooled = [name for name, (_, p) in unseen.items() if p]
    how = "scored as missing" if not pooled else \
        "scored as missing (as '(other)' in " + ", ".join(pooled) + ", which pooled rare categories)"
    what = "1 value was a category" if total == 1 else f"{total} values were categories"
    return f"warning: {what} the model never saw ({per}{more}); {how}"


def _predict_stream(ens, batches, out: Path, kind: str, keep=(), unseen=None, members: int | None = None) -> int:
    """Score batch after batch into a temp file beside out, renamed at the end (a failed run never
    leaves half a file under the asked name); a progress bar on a terminal. Returns the rows written.
    keep: columns of the table copied first; unseen: a dict that adds up unseen_levels per batch."""
    import tempfile

    import numpy as np
    import pyarrow as pa

    from baggr.data import unseen_levels
    classes = pa.array(list(ens.classes)) if ens.task == "classes" else None
    from baggr.atomic import ordinary_mode
    fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=out.suffix, dir=out.parent.resolve())
    os.close(fd)
    writer, rows = None, 0
    bar = _Bar(batches) if sys.stderr.isatty() else None
    try:
        for X in batches:
            cols = {k: X.column(k) for k in keep}
            if unseen is not None:
                for name, (k, pooled) in unseen_levels(X, ens.schema).items():
                    unseen[name] = (unseen.get(name, (0, pooled))[0] + k, pooled)
            if classes is not None:
                shares = ens.vote_shares(X, members=members)
                cols["prediction"] = classes.take(pa.array(np.argmax(shares, axis=1)))
                for k, c in enumerate(ens.classes):
                    cols[f"share_{c}"] = pa.array(shares[:, k])
            else:
                cols["prediction"] = pa.array(np.asarray(ens.predict(X, members=members), dtype=np.float64))
            table = pa.table(cols)
            if writer is None:
                writer = _writer(tmp, table.schema, kind)
            writer.write_table(table)
            rows += table.num_rows
            if bar is not None:
                bar.update(rows)
        if writer is None:
            raise DataError(f"{batches.path} has no rows")
        writer.close()
        writer = None
        ordinary_mode(tmp)    # mkstemp makes it private: the output is as shareable as any new file
        os.replace(tmp, out)
    except OSError as e:
        raise BaggrError(f"cannot write {out}: {e.strerror or e}") from None
    finally:
        if bar is not None:
            bar.close()
        if writer is not None:
            writer.close()
        if os.path.exists(tmp):
            os.unlink(tmp)
    return rows


def _writer(tmp: str, schema, kind: str):
    if kind == "parquet":
        import pyarrow.parquet as pq
        return pq.ParquetWriter(tmp, schema)
    import pyarrow.csv as pacsv
    return pacsv.CSVWriter(tmp, schema, write_options=pacsv.WriteOptions(delimiter="\t" if kind == "tsv" else ","))


class _Bar:
    """A progress bar on stderr: bytes of a plain CSV read, else rows of a known total, else rows."""

    def __init__(self, batches):
        from rich.console import Console
        from rich.progress import BarColumn, Progress, TextColumn, TimeRemainingColumn
        self.batches = batches
        self.progress = Progress(TextColumn("scoring"), BarColumn(), TextColumn("{task.fields[rows]:,} rows"),
                                 TimeRemainingColumn(), console=Console(stderr=True), transient=True)
        self.task = self.progress.add_task("scoring", total=None, rows=0)
        self.progress.start()

    def update(self, rows: int) -> None:
        self.progress.update(self.task, completed=self.batches.done, total=self.batches.total, rows=rows)

    def close(self) -> None:
        self.progress.stop()


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
    mode = run_mode(args)
    try:
        say("\n".join(textwrap.wrap(scenario.DESCRIPTION, text_width())))
        say()
        say(str(rd.path))
        path = scenario.write(rd / "demo-data.csv", rows=args.rows, seed=args.data_seed)
        info = runs.fingerprint(path)
        runs.init_config(rd, data=info, target=scenario.TARGET, config=config, settings=runs.RunSettings())
    except BaggrError:
        discard(rd)
        raise
    code = launch(rd, mode, fresh=True)
    st, status = rd.state()
    if code == 0 and status in ("finished", "stopped"):
        from rich.console import Console
        say()
        report.render(report.load(rd.path), Console())
        say()
        say(f"next: baggr report {rd.path} --json")
        say(f"      baggr predict {rd.path} {rd / 'demo-data.csv'} --out scored.csv")
    return code
