"""`baggr compare` and what resume, stop, watch and report do with a comparison directory; the
comparison's progress lines (plain, one a round of blocks)."""
from __future__ import annotations

import json
import sys
import time
from pathlib import Path

from baggr.cli.launch import discard, run_mode, say
from baggr.cli.progress import where
from baggr.errors import BaggrError, ConfigError

LISTED = ("members", "features_per_split", "min_leaf", "depth_limit", "draw", "draw_fraction", "bins", "vote")


# ---------------------------------------------------------------- the candidates from the command line

def _base_and_candidates(args):
    from baggr.config import Config
    from baggr.runs import comparison
    values = {k: getattr(args, k) for k in LISTED}
    firsts = {k: v[0] for k, v in values.items()}
    base = Config(**firsts, task=args.task, seed=args.seed, threads=args.threads, keep_members=not args.estimate_only,
                  measure=args.measure)   # each candidate refits the chosen measure beside the error
    if args.candidates:
        many = [k.replace("_", "-") for k, v in values.items() if len(v) > 1]
        if many:
            raise ConfigError(f"--candidates lists the candidates: give --{many[0]} one value")
        return base, read_candidates(args.candidates)
    cands = comparison.grid(values)
    return base, cands


def _value(key: str, text: str):
    """A setting's value from a candidates file's text."""
    t = text.strip()
    if key == "depth_limit" and t.lower() in ("none", "null"):
        return None
    if key in ("features_per_split",) and t in ("sqrt", "log2"):
        return t
    if key in ("draw", "vote", "criterion"):
        return t
    try:
        return int(t)
    except ValueError:
        pass
    try:
        return float(t)
    except ValueError:
        return t


def read_candidates(path) -> list[dict]:
    """Candidates from a file: a JSON list of {setting: value} objects, or one line per candidate of
    setting=value pairs separated by spaces or commas (# starts a comment)."""
    p = Path(path)
    try:
        text = p.read_text()
    except FileNotFoundError:
        raise ConfigError(f"candidates file not found: {p}") from None
    except (OSError, UnicodeDecodeError) as e:
        raise ConfigError(f"cannot read the candidates file {p}: {e}") from None
    if text.lstrip().startswith("["):
        try:
            items = json.loads(text)
        except ValueError as e:
            raise ConfigError(f"{p} is not valid JSON ({e})") from None
        if not isinstance(items, list) or not all(isinstance(i, dict) for i in items):
            raise ConfigError(f"{p} must hold a JSON list of objects, one per candidate")
        return [{k.replace("-", "_"): v for k, v in i.items()} for i in items]
    out = []
    for n, line in enumerate(text.splitlines(), 1):
        line = line.split("#", 1)[0].strip()
        if not line:
            continue
        cand = {}
        for pair in line.replace(",", " ").split():
            key, eq, val = pair.partition("=")
            if not eq or not key or not val:
                raise ConfigError(f"{p} line {n}: expected setting=value pairs, got {pair!r}")
            key = key.strip().lstrip("-").replace("-", "_")
            if key in cand:
                raise ConfigError(f"{p} line {n}: {key} given twice")
            cand[key] = _value(key, val)
        out.append(cand)
    if not out:
        raise ConfigError(f"{p} lists no candidates")
    return out


# ---------------------------------------------------------------- the commands

def cmd_compare(args) -> int:
    from baggr import runs
    from baggr.cli.commands import _cluster, _settings
    from baggr.oob import ranking
    from baggr.runs import comparison
    cluster = _cluster(args)
    base, cands = _base_and_candidates(args)
    if args.measure is not None:
        known = ranking.CLASS_MEASURES + ranking.REGRESSION_MEASURES   # baggr.oob.measures' names
        if args.measure not in known:
            raise ConfigError(f"--measure must be one of {', '.join(known)}, got {args.measure!r}")
    from baggr.cli.main import table_options
    settings = _settings(args)
    info = runs.fingerprint(args.data)
    cmp = comparison.create_comparison(args.run_dir or comparison.default_dir(args.data), data=info,
                                       target=args.target, base=base, candidates=cands, settings=settings,
                                       table=table_options(args),
                                       block=args.block if args.block is not None else comparison.DEFAULT_BLOCK,
                                       measure=args.measure, force=args.force)
    return launch(cmp, run_mode(args), fresh=True, announce=str(cmp.path), cluster=cluster, debug=args.debug)


def launch(cmp, mode: str, *, fresh: bool, announce: str | None = None, cluster: str | None = None,
           debug: bool = False) -> int:
    """Run a comparison's job: detached and followed (a terminal), or in this process with plain lines;
    cluster: where every candidate's members grow (None: local threads)."""
    from baggr.runs.compare_job import ComparisonJob
    rd = cmp.rundir()
    if mode == "detached":
        from baggr import runs
        pid = rd.lock_holder()
        if pid:
            raise runs.RunDirError(f"{rd.path} is already running (pid {pid}); watch it with: baggr watch {rd.path}")
        st, _ = rd.state()
        proc = runs.spawn(rd, cluster=cluster)
        try:
            code = runs.wait_started(rd, proc, st.starts)
        except KeyboardInterrupt:
            say(f"left the comparison starting in the background (pid {proc.pid}); "
                f"follow it with: baggr watch {rd.path}")
            return 0
        if code is not None:
            line = runs.job_error_line(rd) or f"baggr: error: the comparison ended before it started (exit {code})"
            sys.stderr.write(line + "\n")
            if fresh and code == 2:
                discard(rd)
            return code if code else 2
        if announce is not None:
            say(announce)
        return watch(cmp)
    if cluster is not None and not debug:
        from baggr.backends.dask_connect import quiet_logs
        quiet_logs()     # the job says what matters in its own lines
    progress = CompareProgress(sys.stdout)
    if announce is not None:
        progress.announce = announce
    job = ComparisonJob(cmp, progress, verify=False, cluster=cluster)
    try:
        out = job.run()
    except BaggrError:
        if fresh and not job.started:
            discard(rd)
        raise
    say(out.message)
    return out.code


def cmd_job(args) -> int:
    from baggr.runs import comparison
    from baggr.runs.compare_job import ComparisonJob
    if args.cluster is not None and not args.debug:
        from baggr.backends.dask_connect import quiet_logs
        quiet_logs()
    job = ComparisonJob(comparison.read(args.dir), CompareProgress(sys.stdout), verify=args.verify,
                        cluster=args.cluster)
    out = job.run()
    say(out.message)
    return out.code


def cmd_resume(args) -> int:
    from baggr import runs
    from baggr.runs import comparison
    from baggr.cli.commands import _cluster
    cluster = _cluster(args)
    cmp = comparison.read(args.dir)
    rd = cmp.rundir()
    st, status = rd.state()
    pid = rd.lock_holder()
    if pid or status == "running":
        raise runs.RunDirError(f"{rd.path} is already running (pid {pid or st.pid}); watch it with: baggr watch {rd.path}")
    for sub in cmp.run_dirs():
        if sub.lock_holder():
            raise runs.RunDirError(f"candidate {sub.path} is running on its own (pid {sub.lock_holder()}); "
                                   f"stop it first (baggr stop {sub.path})")
    if st.status == "finished":
        say(f"{rd.path} is finished ({st.reason}); nothing to resume")
        return 0
    runs.check_data(cmp.data)
    return launch(cmp, run_mode(args), fresh=False, cluster=cluster, debug=args.debug)


def cmd_stop(args) -> int:
    from baggr.runs import RunDirError, comparison, journal
    cmp = comparison.read(args.dir)
    rd = cmp.rundir()
    st, status = rd.state()
    if status != "running":
        raise RunDirError(f"no comparison is running in {rd.path} (it is {status})")
    journal.request_stop(rd.path)
    say(f"asked the comparison (pid {st.pid}) to stop all candidates after the member in hand")
    if args.wait:
        while rd.state()[1] == "running":
            time.sleep(0.2)
        st, status = rd.state()
        say(f"{status} ({st.reason})")
    return 0


def cmd_watch(args) -> int:
    from baggr.runs import comparison
    return watch(comparison.read(args.dir))


def watch(cmp) -> int:
    """The comparison's board on a terminal (every candidate's curve, the ranked table; Enter opens a
    candidate's dashboard), else a line a round until it ends (Ctrl-C leaves it running)."""
    rd = cmp.rundir()
    end = None
    board = None
    if sys.stdout.isatty():
        import importlib.util
        try:
            if importlib.util.find_spec("tui.compare") is not None:
                from tui import watch_comparison as board
        except (ImportError, ValueError):
            board = None
    if board is not None:
        board(str(rd.path))
    else:
        progress = CompareProgress(sys.stdout)
        try:
            end = follow(rd.path, progress, is_done=lambda: rd.state()[1] not in ("running", "waiting"))
        except KeyboardInterrupt:
            end = None
    st, status = rd.state()
    if status == "running":
        say(f"the comparison goes on in the background (pid {st.pid}); follow it with: baggr watch {rd.path}")
        return 0
    if status in ("failed", "crashed"):
        sys.stderr.write(f"baggr: error: the comparison {status}: {st.reason or 'no end line'}; "
                         f"continue with: baggr resume {rd.path}\n")
        return 2
    say(f"{status} ({st.reason}); the figures: baggr report {rd.path}")
    return 0 if end is None or end.get("status") != "failed" else 2


def cmd_report(args) -> int:
    from baggr.cli import compare_report, outputs
    if getattr(args, "rows", None) or getattr(args, "keep", None):
        raise ConfigError(f"--rows and --keep need a run directory: {args.dir} is a comparison; give one "
                          f"candidate's folder inside it")
    r = compare_report.load(args.dir, measure=getattr(args, "measure", None))
    files = []
    if getattr(args, "html", None):
        files.append(outputs.write_comparison_html(r, Path(args.html), args.force))
    if getattr(args, "figures", None):
        files.append(outputs.write_comparison_figures(r, Path(args.figures), args.force))
    if args.json:
        say(json.dumps(compare_report.to_json(r), allow_nan=False))
    elif not files:
        from rich.console import Console
        compare_report.render(r, Console())
    for line in files:    # with --json, stdout holds the JSON alone
        if args.json:
            sys.stderr.write(line + "\n")
        else:
            say(line)
    return 0


# ---------------------------------------------------------------- progress lines

def _count(n) -> str:
    from baggr import units
    return units.count(n) if isinstance(n, int) else str(n)


def _num(v, task) -> str:
    from baggr import units
    return units.value(v) if task == "regression" else units.percent(v)


class CompareProgress:
    """A line when the comparison starts, a line a round (each candidate's members and figure), notes."""

    def __init__(self, stream=None, seconds: float = 5.0, get_time=time.monotonic):
        self.stream = stream or sys.stdout
        self.seconds, self.get_time = seconds, get_time
        self.announce = None
        self.task = None
        self.last_t = None
        self.pending = None
        self.dead = False

    def _say(self, line: str) -> None:
        if self.dead:
            return
        try:
            self.stream.write(line + "\n")
            self.stream.flush()
        except (OSError, ValueError):
            self.dead = True

    def begin(self, f: dict) -> None:
        if self.announce is not None:
            self._say(self.announce)
            self.announce = None
        self.task = f.get("task")
        what = "regression" if self.task == "regression" else "classes"
        verb = "resuming" if f.get("first_member") else "comparing"
        self._say(f"{verb}: {f.get('candidates')} candidates on {_count(f.get('rows'))} rows x {_count(f.get('features'))} features "
                  f"({what}), blocks of {f.get('block')} members, {where(f)}")

    def line(self, f: dict) -> str:
        what = "MSE" if self.task == "regression" else "error"
        cands = f.get("candidates") or []
        names = {c.get("measure") for c in cands}
        if len(names) == 1 and None not in names:
            # every candidate carries the chosen measure's estimate: the line shows it
            from baggr.runs.measure_points import LABELS
            name = names.pop()
            rate = name in ("error", "balanced-error")
            parts = [f"c{i} {c.get('member')}/{c.get('members')} "
                     f"{_num(c['value'], 'classes') if rate else format(c['value'], '.4g')}"
                     for i, c in enumerate(cands, 1)]
            what = LABELS.get(name, name).removeprefix("OOB ")
        else:
            parts = [f"c{i} {c.get('member')}/{c.get('members')} {_num(c.get('error'), self.task)}"
                     for i, c in enumerate(cands, 1)]
        if len(parts) > 8:
            parts = parts[:8] + [f"... ({len(parts) - 8} more)"]
        # the last block may stop short of its round number: say the size the candidates reached
        sizes = [c.get("members") for c in f.get("candidates") or [] if c.get("members")]
        until = f.get("until")
        if until is not None and sizes:
            until = min(until, max(sizes))
        return f"up to {until} members, OOB {what}: " + "  ".join(parts)

    def round(self, f: dict) -> None:
        now = self.get_time()
        if self.last_t is None or now - self.last_t >= self.seconds:
            self._say(self.line(f))
            self.last_t, self.pending = now, None
        else:
            self.pending = f

    def note(self, text: str) -> None:
        self._say(text)

    def end(self, f: dict) -> None:
        if self.pending is not None:
            self._say(self.line(self.pending))
            self.pending = None


def follow(run_dir, progress, *, is_done=None, poll: float = 0.25) -> dict | None:
    """Feed a comparison's journal (from its latest start) into progress until its end line or is_done()."""
    from baggr.runs.journal import JOURNAL, JournalReader
    reader = JournalReader(Path(run_dir) / JOURNAL)
    events = reader.read_new()
    starts = [i for i, ev in enumerate(events) if ev.get("event") == "start"]
    if starts:
        events = events[starts[-1]:]
    while True:
        for ev in events:
            kind = ev.get("event")
            if kind == "start":
                progress.begin(ev)
            elif kind == "round":
                progress.round(ev)
            elif kind == "end":
                progress.end(ev)
                return ev
        if is_done is not None and is_done():
            events = reader.read_new()
            if not events:
                return None
            continue
        time.sleep(poll)
        events = reader.read_new()
