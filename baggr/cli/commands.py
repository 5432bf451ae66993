"""The commands of `baggr`, one function each: args in, exit code out (a BaggrError for what the user can fix)."""
from __future__ import annotations

import json
import os
import sys
import textwrap
import time
from pathlib import Path

from baggr.cli.launch import attach, discard, launch, run_mode, say
from baggr.errors import BaggrError, ConfigError


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


def cmd_train(args) -> int:
    from baggr import runs
    config, settings = _config(args), _settings(args)
    info = runs.fingerprint(args.data)
    rd = runs.create(args.run_dir or runs.default_run_dir(args.data), force=args.force)
    try:
        runs.init_config(rd, data=info, target=args.target, config=config, settings=settings)
    except BaggrError:
        discard(rd)
        raise
    # the run directory is the first line, printed once the job has started (a start that fails
    # removes the directory)
    return launch(rd, run_mode(args), fresh=True, announce=str(rd.path))


def _comparison(path) -> bool:
    from baggr.runs.comparison import is_comparison
    return is_comparison(path)


def cmd_compare(args) -> int:
    from baggr.cli import compare
    return compare.cmd_compare(args)


def cmd_resume(args) -> int:
    from baggr import runs
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
    if st.status == "finished" and (rd / runs.MODEL).exists():
        say(f"{rd.path} is finished ({st.members} members; {st.reason}); nothing to resume")
        return 0
    runs.check_data(cfg["data"])
    return launch(rd, run_mode(args), fresh=False)


def cmd_job(args) -> int:
    if _comparison(args.dir):
        from baggr.cli import compare
        return compare.cmd_job(args)
    from baggr.cli import progress as prog
    from baggr.runs import Job, RunDir
    job = Job(RunDir(args.dir), prog.PlainProgress(sys.stdout), verify=args.verify)
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
        say(f"the job goes on (pid {st.pid}); reattach with: baggr watch {rd.path}")
    return code


def cmd_stop(args) -> int:
    if _comparison(args.dir):
        from baggr.cli import compare
        return compare.cmd_stop(args)
    from baggr.runs import journal
    from baggr.runs import RunDir, RunDirError
    rd = RunDir(args.dir).require()
    st, status = rd.state()
    if status != "running":
        raise RunDirError(f"no job is running in {rd.path} (it is {status})")
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
    from baggr.cli import report
    r = report.load(args.dir)
    if args.json:
        say(json.dumps(report.figures(r), allow_nan=False))
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
    say(f"wrote {len(cols['prediction'])} predictions to {out}")
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
    mode = run_mode(args)
    try:
        say("\n".join(textwrap.wrap(scenario.DESCRIPTION, 88)))
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
        say(f"next: baggr report {rd.path} --json   |   "
             f"baggr predict {rd.path} {rd / 'demo-data.csv'} --out scored.csv")
    return code
