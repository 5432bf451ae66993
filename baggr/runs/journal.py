"""The journal of a run: one JSON line per event, its writer, its tailing reader and the folded run state.

Pure Python (no numpy, no numba): the dashboard imports this and nothing else of the engine.
See the run-directory notes in DESIGN.md for the events and their fields.
"""
from __future__ import annotations

import json
import math
import os
import socket
import time
from array import array
from bisect import bisect_left
from collections import deque
from pathlib import Path

from baggr.atomic import replace_atomic
from baggr.errors import RunDirError  # noqa: F401  (re-exported for the dashboard)
from baggr.oob.intervals import wilson

try:  # optional: parses a journal about 4.7x faster than the json module (0.16 s against 0.76 s
    import orjson as _orjson  # for 100,000 member lines, measured); without it json does the same job
except ImportError:
    _orjson = None

JOURNAL = "journal.jsonl"
STOP = "stop"
STATUSES = ("waiting", "running", "finished", "stopped", "failed", "crashed")
END_STATUSES = ("finished", "stopped", "failed")


# ---------------------------------------------------------------- writing

def _clean(v):
    """A copy of v that strict JSON accepts: NaN and infinities become null, arrays become lists."""
    if isinstance(v, float):
        return v if math.isfinite(v) else None
    if isinstance(v, dict):
        return {k: _clean(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_clean(x) for x in v]
    if hasattr(v, "tolist"):          # numpy arrays and scalars, without importing numpy
        return _clean(v.tolist())
    return v


def _default(v):
    if hasattr(v, "tolist"):
        return v.tolist()
    raise TypeError(f"cannot write a {type(v).__name__} to the journal")


def dumps(event: str, fields: dict, t: float) -> str:
    """One journal line (without its newline)."""
    obj = {"event": event, "t": round(t, 3), **fields}
    try:
        return json.dumps(obj, separators=(",", ":"), allow_nan=False, default=_default)
    except ValueError:                # a NaN somewhere: the rare slow path
        return json.dumps(_clean(obj), separators=(",", ":"), allow_nan=False, default=_default)


class JournalWriter:
    """Appends events to a journal, one flushed line each; never truncates."""

    def __init__(self, path, *, get_time=time.time):
        self.path = Path(path)
        self._get_time = get_time
        # O_APPEND: every line lands at the end even if another writer appended meanwhile.
        self._fd = os.open(self.path, os.O_WRONLY | os.O_APPEND | os.O_CREAT, 0o644)

    def write(self, event: str, **fields) -> None:
        """Append one event line ("event" and "t" are added)."""
        data = (dumps(event, fields, self._get_time()) + "\n").encode()
        # One write call per line, so a reader sees at most a torn tail, never interleaved halves.
        view = memoryview(data)
        while view:
            n = os.write(self._fd, view)
            view = view[n:]

    def fsync(self) -> None:
        """Force the lines written so far to disk."""
        os.fsync(self._fd)

    def close(self) -> None:
        if self._fd is not None:
            os.close(self._fd)
            self._fd = None

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def __del__(self):
        try:
            self.close()
        except Exception:
            pass


# ---------------------------------------------------------------- reading

_SCAN = json.JSONDecoder().scan_once


class JournalReader:
    """Reads a growing journal from where it left off.

    `restarted` is True after a read_new() that found the file truncated or replaced: that call
    returns nothing, the caller drops what it folded before, and the next call reads from byte 0.
    `malformed` counts complete lines that were not JSON objects (skipped).
    """

    def __init__(self, path):
        self.path = Path(path)
        self.offset = 0
        self.malformed = 0
        self.restarted = False
        self.restarts = 0
        self._ident = None
        self._partial = b""

    def _start_over(self) -> None:
        self.offset = 0
        self._partial = b""
        self._ident = None
        self.restarted = True
        self.restarts += 1

    def read_new(self, max_bytes: int | None = None) -> list[dict]:
        """Events of the complete lines added since the last call (at most about max_bytes of them)."""
        out: list[dict] = []
        self.read_into(out.append, max_bytes)
        return out

    def read_into(self, sink, max_bytes: int | None = None) -> int:
        """Like read_new, but hands each event to sink(event) as it is parsed; returns how many.

        Folding each event at once keeps few objects alive, which spares the garbage collector
        most of its work on a long journal (about a fifth of the opening read, measured).
        """
        self.restarted = False
        try:
            with open(self.path, "rb") as f:
                st = os.fstat(f.fileno())
                ident = (st.st_dev, st.st_ino)
                if self._ident is not None and (ident != self._ident or st.st_size < self.offset):
                    # Say so before reading on: the caller drops what it folded, then calls again.
                    self._start_over()
                    return 0
                self._ident = ident
                if st.st_size == self.offset:
                    return 0
                f.seek(self.offset)
                data = f.read(max_bytes if max_bytes else -1)
        except FileNotFoundError:
            if self._ident is not None:   # it was there before: whatever comes next is a new file
                self._start_over()
            return 0
        self.offset += len(data)
        end = data.rfind(b"\n")
        if end < 0:                        # still no complete line: keep it all for later
            self._partial += data
            return 0
        chunk = self._partial + data[:end] if self._partial else data[:end]
        self._partial = data[end + 1:]
        return self._parse(chunk, sink)

    def _parse(self, chunk: bytes, append) -> int:
        if _orjson is not None:
            return self._parse_orjson(chunk, append)
        n = 0
        # The C scanner on str is about 1.5x json.loads on bytes per line (measured: 0.8 s against
        # 1.2-1.5 s for 100,000 member lines), and opening a long journal is mostly this loop.
        scan = _SCAN
        for line in chunk.decode("utf-8", errors="replace").split("\n"):
            try:
                obj, end = scan(line, 0)
                if end != len(line) and line[end:].strip():
                    raise ValueError("more after the object")
            except (StopIteration, ValueError, RecursionError):
                if not line.strip():
                    continue
                obj = self._slow(line)
                if obj is not None:
                    append(obj)
                    n += 1
                continue
            if type(obj) is dict and type(obj.get("event")) is str:
                append(obj)
                n += 1
            else:
                self.malformed += 1
        return n

    def _parse_orjson(self, chunk: bytes, append) -> int:
        n = 0
        loads = _orjson.loads
        for line in chunk.split(b"\n"):
            try:
                obj = loads(line)
            except ValueError:                 # orjson.JSONDecodeError is a ValueError
                if not line.strip():
                    continue
                obj = self._slow(line.decode("utf-8", errors="replace"))
                if obj is not None:
                    append(obj)
                    n += 1
                continue
            if type(obj) is dict and type(obj.get("event")) is str:
                append(obj)
                n += 1
            else:
                self.malformed += 1
        return n

    def _slow(self, line: str):
        """An event from a line the fast path refused, or None (counted as malformed)."""
        try:                                   # leading blanks and the like
            obj = json.loads(line)
            if type(obj) is dict and type(obj.get("event")) is str:
                return obj
        except (ValueError, RecursionError):
            pass
        self.malformed += 1
        # A whole event after a torn one (a job killed mid-line, then resumed) is kept.
        k = line.find('{"event"', 1)
        if k < 0:
            return None
        try:
            obj, end = _SCAN(line, k)
        except (StopIteration, ValueError, RecursionError):
            return None
        if line[end:].strip() or type(obj) is not dict or type(obj.get("event")) is not str:
            return None
        return obj

    @property
    def pending(self) -> int:
        """Bytes of a torn last line held back until its newline arrives."""
        return len(self._partial)

    def pending_bytes(self) -> bool:
        """True when the file holds bytes not read yet."""
        try:
            return self.path.stat().st_size > self.offset
        except OSError:
            return False


# ---------------------------------------------------------------- the folded state

def class_interval(error: float | None, n: int) -> tuple[float, float] | None:
    """Wilson 95% interval of a class's OOB error rate over its n OOB-covered rows (Wilson 1927)."""
    if error is None or n <= 0:
        return None
    return wilson(round(error * n), n)


NAN = math.nan


def _opt(v):
    return None if v is None else float(v)


def bucket_plan(xs, width: int, log: bool = False) -> tuple:
    """How to cut a curve of len(xs) points into buckets for `width` points of drawing.

    Linear: runs of s points, s a power of two. Log: spans of 1/r decade of x, r a power of two.
    Sizes are powers of two so that buckets once complete stay the same as the curve grows
    (their extremes can be kept). Returns (kind, size).
    """
    n = len(xs)
    buckets = max(1, (int(width) - 2) // 2)
    if log and n and xs[0] >= 1:
        lo, hi = math.log10(xs[0]), math.log10(xs[-1])
        r = 1024.0
        while r > 1e-3 and math.floor(r * hi) - math.floor(r * lo) + 1 > buckets:
            r /= 2
        return ("log", r)
    s = 1
    while -(-n // s) > buckets:
        s *= 2
    return ("lin", s)


def bucket_edges(xs, plan: tuple) -> list[int]:
    """Index where each bucket of `plan` starts, and len(xs) at the end."""
    n = len(xs)
    kind, size = plan
    if kind == "lin":
        return list(range(0, n, size)) + [n]
    first = math.floor(size * math.log10(xs[0]))
    last = math.floor(size * math.log10(xs[-1]))
    return [0] + [bisect_left(xs, 10 ** (i / size)) for i in range(first + 1, last + 1)] + [n]


def _extremes(ys, a: int, b: int) -> tuple:
    """Indices of the min and max of ys[a:b], NaN left out; () when all are NaN."""
    seg = ys[a:b]
    if math.isnan(sum(seg)):        # rare (early members): drop NaN before min/max
        vals = [(v, i) for i, v in enumerate(seg) if v == v]
        if not vals:
            return ()
        return (a + min(vals)[1], a + max(vals)[1])
    return (a + seg.index(min(seg)), a + seg.index(max(seg)))


def downsample(xs, ys, width: int, log: bool = False, cache: dict | None = None) -> tuple[list, list]:
    """At most `width` points of (xs, ys) that keep the first and last number and each bucket's min and max.

    xs ascending. NaN values are left out. `cache` (a dict the caller keeps per series, emptied when
    the curve is cut back) keeps the extremes of complete buckets between calls.
    """
    n = len(ys)
    width = max(4, int(width))
    if n <= width:
        pts = [(x, y) for x, y in zip(xs, ys) if y == y]
        return [p[0] for p in pts], [p[1] for p in pts]
    plan = bucket_plan(xs, width, log)
    edges = bucket_edges(xs, plan)
    if cache is not None and cache.get("plan") != plan:
        cache.clear()
        cache["plan"] = plan
    done = cache.setdefault("done", {}) if cache is not None else None
    first, last = 0, n - 1
    while first < last and ys[first] != ys[first]:      # the curve starts at its first number
        first += 1
    while last > first and ys[last] != ys[last]:
        last -= 1
    keep = {first, last}
    kind, size = plan
    for j, (a, b) in enumerate(zip(edges, edges[1:])):
        if b <= a:
            continue
        key = (a, b)
        ext = done.get(key) if done is not None else None
        if ext is None:
            ext = _extremes(ys, a, b)
            complete = b < n or (kind == "lin" and b - a == size)
            if done is not None and complete:
                done[key] = ext
        keep.update(ext)
    idx = sorted(i for i in keep if ys[i] == ys[i])
    return [xs[i] for i in idx], [ys[i] for i in idx]


class RunState:
    """What the journal says so far: a summary and the whole per-member curve in compact arrays.

    The latest figures (error, interval, class_error, coverage, confusion, r2, rate) are read from
    the last member line when asked for, so folding a long journal costs only the curve appends.
    """

    def __init__(self):
        self.reset()

    def reset(self) -> None:
        """Forget everything (the journal was replaced)."""
        self.task = None
        self.classes: list[str] = []
        self.class_rows: list[int] = []
        self.rows = None
        self.features = None
        self.members_target = None
        self.members = 0
        self.first_member = 0
        self.starts = 0
        self.resumed = False
        self.elapsed = 0.0
        self.pid = None
        self.pid_started = None
        self.host = None
        self.threads = None
        self.config = None
        self.version = None
        self.status = "waiting"
        self.reason = None
        self.started_t = None      # t of the first start line
        self.last_t = None         # t of the latest line
        self.last_checkpoint = None
        self.warnings: deque = deque(maxlen=20)
        self.events = 0
        self.unreadable = 0        # events whose fields did not make sense
        self._last = None          # the latest member line (a dict), or figures restored from the curve
        # The curve: member numbers (ascending) and one value per member. float32 where only drawn.
        self.curve_member = array("i")
        self.curve_error = array("d")
        self.curve_lo = array("f")
        self.curve_hi = array("f")
        self.curve_r2 = array("f")
        self.curve_class: list[array] = []
        self._drawn: dict = {}     # per series: extremes of complete buckets (see downsample)

    # -- folding

    def fold(self, ev: dict) -> None:
        """Take one event into the state."""
        self.events += 1
        try:
            kind = ev["event"]
            if kind == "member":
                self._member(ev)
            elif kind == "start":
                self._start(ev)
            elif kind == "end":
                self._end(ev)
            elif kind == "checkpoint":
                self.last_checkpoint = int(ev["member"])
            elif kind == "warning":
                self.warnings.append(str(ev.get("message", "")))
            t = ev.get("t")
            if t is not None:
                self.last_t = float(t)
        except (KeyError, TypeError, ValueError, IndexError, OverflowError):
            self.unreadable += 1

    def fold_all(self, events) -> None:
        for ev in events:
            self.fold(ev)

    def _start(self, ev: dict) -> None:
        classes = [str(c) for c in ev.get("classes") or []]
        class_rows = [int(r) for r in ev.get("class_rows") or []]
        first = int(ev.get("first_member") or 0)
        self.starts += 1
        self.task = ev.get("task", self.task)
        self.classes, self.class_rows = classes, class_rows
        self.rows = ev.get("rows", self.rows)
        self.features = ev.get("features", self.features)
        self.members_target = ev.get("members_target", self.members_target)
        self.pid = ev.get("pid")
        self.pid_started = ev.get("pid_started")
        self.host = ev.get("host")
        self.threads = ev.get("threads")
        self.config = ev.get("config", self.config)
        self.version = ev.get("version", self.version)
        self.resumed = bool(ev.get("resumed", self.starts > 1))
        self.first_member = first
        if self.started_t is None:
            self.started_t = ev.get("t")
        self.status = "running"
        self.reason = None
        n = len(self.curve_member)
        while len(self.curve_class) < len(classes):
            self.curve_class.append(array("f", [math.nan]) * n)
        # A resumed job goes on from its checkpoint: members journaled after it are grown again.
        self._truncate(first)

    def _truncate(self, member: int) -> None:
        """Drop the curve after `member` members."""
        cut = bisect_left(self.curve_member, member + 1)
        if cut == len(self.curve_member):
            return
        for arr in (self.curve_member, self.curve_error, self.curve_lo, self.curve_hi, self.curve_r2,
                    *self.curve_class):
            del arr[cut:]
        self._drawn.clear()
        self.members = member
        # The latest figures now come from the curve; coverage and confusion are unknown until the next line.
        if cut:
            i = cut - 1
            lo, hi = self.curve_lo[i], self.curve_hi[i]
            self._last = {"member": self.curve_member[i], "error": _none_if_nan(self.curve_error[i]),
                          "interval": None if lo != lo else [lo, hi],
                          "class_error": [_none_if_nan(c[i]) for c in self.curve_class],
                          "r2": _none_if_nan(self.curve_r2[i]), "restored": True}
        else:
            self._last = None

    def _member(self, ev: dict) -> None:
        m = int(ev["member"])
        err = ev.get("error")
        err = NAN if err is None else float(err)
        iv = ev.get("interval")
        if iv:
            lo, hi = iv
            lo = NAN if lo is None else float(lo)
            hi = NAN if hi is None else float(hi)
        else:
            lo = hi = NAN
        r2 = ev.get("r2")
        r2 = NAN if r2 is None else float(r2)
        ce = ev.get("class_error") or ()
        ce = [NAN if c is None else float(c) for c in ce]
        # Everything converted: now the arrays grow together or not at all.
        cm = self.curve_member
        if cm and m <= cm[-1]:
            self._truncate(m - 1)      # a member journaled twice: the later line wins
        curves = self.curve_class
        if len(curves) < len(ce):
            n = len(cm)
            while len(curves) < len(ce):
                curves.append(array("f", [NAN]) * n)
        cm.append(m)
        self.curve_error.append(err)
        self.curve_lo.append(lo)
        self.curve_hi.append(hi)
        self.curve_r2.append(r2)
        k = len(ce)
        for j, c in enumerate(curves):
            c.append(ce[j] if j < k else NAN)
        self.members = m
        el = ev.get("elapsed")
        if el is not None:
            self.elapsed = float(el)
        self._last = ev

    def _end(self, ev: dict) -> None:
        status = ev.get("status")
        self.status = status if status in END_STATUSES else "failed"
        self.reason = ev.get("reason")
        if ev.get("elapsed") is not None:
            self.elapsed = float(ev["elapsed"])

    # -- the latest figures, from the last member line

    def _get(self, name):
        return None if self._last is None else self._last.get(name)

    @property
    def error(self) -> float | None:
        return _opt(self._get("error"))

    @property
    def interval(self) -> tuple[float, float] | None:
        iv = self._get("interval")
        if not iv or iv[0] is None or iv[1] is None:
            return None
        return (float(iv[0]), float(iv[1]))

    @property
    def class_error(self) -> list:
        return [_opt(c) for c in self._get("class_error") or []]

    @property
    def coverage(self) -> float | None:
        return _opt(self._get("coverage"))

    @property
    def oob_rows(self) -> int | None:
        return self._get("oob_rows")

    @property
    def confusion(self) -> list | None:
        conf = self._get("confusion")
        if not isinstance(conf, list):
            return None
        try:
            return [[int(c) for c in row] for row in conf]
        except (TypeError, ValueError):
            return None

    @property
    def r2(self) -> float | None:
        return _opt(self._get("r2"))

    @property
    def rate(self) -> float | None:
        return _opt(self._get("rate"))

    @property
    def member_t(self) -> float | None:
        """t of the latest member line."""
        if self._last is None or self._last.get("restored"):
            return None
        return _opt(self._last.get("t"))

    # -- reading figures

    def class_figures(self) -> list[dict]:
        """Per class: name, rows, share of rows, OOB error, OOB-covered rows and Wilson 95% interval."""
        total = sum(self.class_rows) or (self.rows or 0)
        errors = self.class_error
        conf = self.confusion
        out = []
        for k, name in enumerate(self.classes):
            rows = self.class_rows[k] if k < len(self.class_rows) else None
            err = errors[k] if k < len(errors) else None
            covered = int(sum(conf[k])) if conf is not None and k < len(conf) else None
            out.append({
                "name": name, "rows": rows,
                "share": rows / total if rows is not None and total else None,
                "error": err, "covered": covered,
                "interval": class_interval(err, covered) if covered else None,
            })
        return out

    def curve(self, series="error", width: int = 200, log: bool = False) -> tuple[list, list]:
        """The curve of one series downsampled to at most `width` points: "error", "lo", "hi", "r2" or a class index."""
        if isinstance(series, int):
            ys = self.curve_class[series] if series < len(self.curve_class) else array("f")
        else:
            ys = {"error": self.curve_error, "lo": self.curve_lo, "hi": self.curve_hi, "r2": self.curve_r2}[series]
        return downsample(self.curve_member, ys, width, log=log, cache=self._drawn.setdefault((series, log), {}))

    def eta(self) -> float | None:
        """Seconds left at the recent rate, None when unknown."""
        rate = self.rate
        if not rate or not self.members_target or self.status != "running":
            return None
        return max(0.0, (self.members_target - self.members) / rate)

    def curve_bytes(self) -> int:
        """Memory held by the curve arrays."""
        arrs = [self.curve_member, self.curve_error, self.curve_lo, self.curve_hi, self.curve_r2, *self.curve_class]
        return sum(a.buffer_info()[1] * a.itemsize for a in arrs)


def _none_if_nan(v):
    return None if v != v else float(v)


def read_state(run_dir) -> RunState:
    """The state of a run directory's whole journal, read once."""
    state = RunState()
    reader = JournalReader(Path(run_dir) / JOURNAL)
    while reader.read_into(state.fold, 1 << 20) or reader.pending_bytes():
        pass
    return state


# ---------------------------------------------------------------- the job's process and stop requests

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
