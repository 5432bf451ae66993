"""The journal: writer, tailing reader, folded run state, job status and stop requests."""
from __future__ import annotations

import json
import math
import os
import subprocess
import sys

import numpy as np
import psutil
import pytest

from baggr.errors import BaggrError
from baggr.runs.journal import (JOURNAL, JournalReader, JournalWriter, RunDirError, RunState, bucket_edges,
                           bucket_plan, class_interval, downsample, job_status, read_state, request_stop,
                           stop_requested)


@pytest.fixture(params=["json", "orjson"])
def parser(request, monkeypatch):
    """Every reader test runs with the json module and, where it is installed, with orjson."""
    import baggr.runs.journal_reader as journal
    if request.param == "orjson":
        monkeypatch.setattr(journal, "_orjson", pytest.importorskip("orjson"))
    else:
        monkeypatch.setattr(journal, "_orjson", None)
    return request.param


def strict_loads(line: str):
    """json.loads that refuses NaN and Infinity (RFC 8259 has no such numbers)."""
    def bad(name):
        raise ValueError(f"not strict JSON: {name}")
    return json.loads(line, parse_constant=bad)


def lines_of(path):
    return path.read_text().splitlines()


# ---------------------------------------------------------------- writer

def test_writer_appends_one_strict_line_per_event(tmp_path):
    path = tmp_path / JOURNAL
    with JournalWriter(path, get_time=lambda: 1764612000.1234) as w:
        w.write("member", member=3, error=float("nan"), interval=[0.1, float("inf")],
                class_error=np.array([0.5, np.nan]), oob_rows=np.int64(368), coverage=np.float32(0.25))
        w.fsync()
    with JournalWriter(path) as w:           # a second writer (a resumed job) appends, never truncates
        w.write("end", status="finished")
    rows = [strict_loads(x) for x in lines_of(path)]
    assert len(rows) == 2
    first = rows[0]
    assert first["event"] == "member" and first["t"] == pytest.approx(1764612000.123)
    # NaN and infinity have no JSON spelling: they are written as null (RFC 8259, section 6).
    assert first["error"] is None and first["interval"] == [0.1, None]
    assert first["class_error"] == [0.5, None] and first["oob_rows"] == 368 and first["coverage"] == 0.25
    assert rows[1]["event"] == "end" and rows[1]["status"] == "finished"


def test_writer_refuses_what_json_cannot_hold(tmp_path):
    with JournalWriter(tmp_path / JOURNAL) as w:
        with pytest.raises(TypeError):
            w.write("warning", message=object())


# ---------------------------------------------------------------- reader

@pytest.mark.usefixtures("parser")
def test_offset_never_rereads(tmp_path):
    path = tmp_path / JOURNAL
    w = JournalWriter(path)
    for i in range(10):
        w.write("member", member=i + 1)
    r = JournalReader(path)
    assert [e["member"] for e in r.read_new()] == list(range(1, 11))
    for i in range(10, 15):
        w.write("member", member=i + 1)
    assert [e["member"] for e in r.read_new()] == [11, 12, 13, 14, 15]
    assert r.read_new() == []
    w.close()


@pytest.mark.usefixtures("parser")
def test_torn_last_line_is_kept_until_its_newline(tmp_path):
    path = tmp_path / JOURNAL
    line = json.dumps({"event": "member", "member": 1, "error": 0.25})
    with open(path, "w") as f:
        f.write(line[:17])
    r = JournalReader(path)
    assert r.read_new() == [] and r.pending == 17
    with open(path, "a") as f:
        f.write(line[17:30])
    assert r.read_new() == []
    with open(path, "a") as f:
        f.write(line[30:] + "\n" + line[:5])
    assert r.read_new() == [{"event": "member", "member": 1, "error": 0.25}]
    assert r.malformed == 0 and r.pending == 5


@pytest.mark.usefixtures("parser")
def test_malformed_lines_are_skipped_and_counted(tmp_path):
    path = tmp_path / JOURNAL
    path.write_text('{"event":"start"}\nnot json at all\n[1, 2]\n{"no_event": 1}\n'
                    '{"event":"member","member":1} trailing\n{"event":"member","member":2}\n')
    r = JournalReader(path)
    assert [e["event"] for e in r.read_new()] == ["start", "member"]
    assert r.malformed == 4


@pytest.mark.usefixtures("parser")
def test_event_after_a_torn_line_is_recovered(tmp_path):
    # A job killed mid-line leaves no newline; the resumed job's start line follows on the same line.
    path = tmp_path / JOURNAL
    path.write_text('{"event":"member","member":7,"err{"event":"start","first_member":5}\n')
    r = JournalReader(path)
    assert r.read_new() == [{"event": "start", "first_member": 5}]
    assert r.malformed == 1


@pytest.mark.usefixtures("parser")
def test_truncation_and_replacement_start_over(tmp_path):
    path = tmp_path / JOURNAL
    w = JournalWriter(path)
    for i in range(10):
        w.write("member", member=i + 1)
    w.close()
    r = JournalReader(path)
    assert len(r.read_new()) == 10 and not r.restarted
    # Truncated in place and written again, shorter.
    with open(path, "w") as f:
        f.write('{"event":"start"}\n')
    assert r.read_new() == [] and r.restarted
    assert r.read_new() == [{"event": "start"}] and not r.restarted
    # Replaced by another file (new inode), even a longer one.
    other = tmp_path / "other.jsonl"
    with JournalWriter(other) as w2:
        for i in range(40):
            w2.write("member", member=100 + i)
    os.replace(other, path)
    assert r.read_new() == [] and r.restarted and r.restarts == 2
    assert [e["member"] for e in r.read_new()] == list(range(100, 140))


@pytest.mark.usefixtures("parser")
def test_file_that_does_not_exist_yet(tmp_path):
    path = tmp_path / JOURNAL
    r = JournalReader(path)
    assert r.read_new() == [] and not r.restarted
    path.write_text('{"event":"start"}\n')
    assert r.read_new() == [{"event": "start"}]
    path.unlink()
    assert r.read_new() == [] and r.restarted


# ---------------------------------------------------------------- run state

def start(**kw):
    d = {"event": "start", "t": 100.0, "pid": 1, "pid_started": 50.0, "host": "node7", "threads": 2,
         "task": "classes", "classes": ["idle", "fault"], "class_rows": [800, 200], "rows": 1000,
         "features": 12, "members_target": 10, "first_member": 0, "config": {"seed": 1}, "version": "0.1.0"}
    d.update(kw)
    return d


def member(m, **kw):
    d = {"event": "member", "t": 100.0 + m, "member": m, "elapsed": 2.0 * m, "error": 0.5 / m,
         "interval": [0.4 / m, 0.6 / m], "class_error": [0.1 / m, 0.9 / m], "coverage": min(1.0, 0.4 * m),
         "oob_rows": 368, "confusion": [[790, 10], [120, 80 + m]], "rate": 0.5}
    d.update(kw)
    return d


def test_runstate_folds_a_journal():
    s = RunState()
    assert s.status == "waiting"
    s.fold(start())
    s.fold_all([member(1, error=None, interval=None, class_error=[None, None]), member(2), member(3)])
    s.fold({"event": "checkpoint", "t": 104.0, "member": 3})
    s.fold({"event": "warning", "t": 104.5, "message": "feature 3 is constant"})
    assert s.status == "running" and s.task == "classes" and s.classes == ["idle", "fault"]
    assert s.members == 3 and s.members_target == 10 and s.last_checkpoint == 3
    assert s.error == pytest.approx(0.5 / 3) and s.interval == pytest.approx((0.4 / 3, 0.6 / 3))
    assert s.class_error == pytest.approx([0.1 / 3, 0.9 / 3])
    assert s.confusion == [[790, 10], [120, 83]] and s.coverage == 1.0 and s.elapsed == 6.0
    assert s.pid == 1 and s.pid_started == 50.0 and list(s.warnings) == ["feature 3 is constant"]
    # The whole curve, null as NaN where no row was out of bag yet.
    assert list(s.curve_member) == [1, 2, 3]
    assert math.isnan(s.curve_error[0]) and list(s.curve_error[1:]) == pytest.approx([0.25, 0.5 / 3])
    assert math.isnan(s.curve_class[1][0]) and s.curve_class[1][2] == pytest.approx(0.3)
    # members left over the rate: arithmetic (common practice, no source)
    assert s.eta() == pytest.approx((10 - 3) / 0.5)
    s.fold({"event": "end", "t": 110.0, "status": "finished", "reason": "reached 3 members", "member": 3,
            "elapsed": 7.5})
    assert s.status == "finished" and s.reason == "reached 3 members" and s.elapsed == 7.5 and s.eta() is None


def test_runstate_class_figures_use_the_confusion_rows():
    s = RunState()
    s.fold(start())
    s.fold(member(4, class_error=[10 / 800, 120 / 204], confusion=[[790, 10], [120, 84]]))
    idle, fault = s.class_figures()
    assert idle["rows"] == 800 and idle["share"] == pytest.approx(0.8) and idle["covered"] == 800
    assert fault["covered"] == 204 and fault["error"] == pytest.approx(120 / 204)
    # Wilson's interval for 120 errors in 204, checked against scipy below; here: it holds the rate.
    lo, hi = fault["interval"]
    assert lo < 120 / 204 < hi


def test_runstate_resume_cuts_the_curve_back_to_the_checkpoint():
    s = RunState()
    s.fold(start())
    s.fold_all(member(m) for m in range(1, 8))
    s.fold({"event": "checkpoint", "t": 120.0, "member": 5})
    # The job dies at 7; the resumed job starts from its checkpoint at 5 and grows 6, 7, 8 again.
    s.fold(start(first_member=5, resumed=True, pid=2, t=200.0))
    assert s.status == "running" and s.resumed and s.starts == 2 and s.pid == 2
    assert s.members == 5 and list(s.curve_member) == [1, 2, 3, 4, 5]
    assert s.error == pytest.approx(0.1) and s.confusion is None   # from the curve; the matrix waits
    s.fold_all([member(6, error=0.07), member(7, error=0.06), member(8, error=0.05)])
    assert list(s.curve_member) == [1, 2, 3, 4, 5, 6, 7, 8]
    assert list(s.curve_error[5:]) == pytest.approx([0.07, 0.06, 0.05])
    assert s.members == 8 and s.error == 0.05 and s.started_t == 100.0


@pytest.mark.parametrize("status", ["finished", "stopped", "failed"])
def test_runstate_end_states(status):
    s = RunState()
    s.fold(start())
    s.fold(member(1))
    s.fold({"event": "end", "t": 101.0, "status": status, "reason": "why", "member": 1, "elapsed": 2.0})
    assert s.status == status


def test_runstate_unknown_end_status_reads_as_failed_and_bad_fields_are_counted():
    s = RunState()
    s.fold(start())
    s.fold(member(1))
    s.fold(member(2, error="high"))            # not a number: the line is skipped whole
    s.fold({"event": "member", "t": 1.0})      # no member number
    assert s.unreadable == 2 and s.members == 1
    assert len(s.curve_member) == len(s.curve_error) == len(s.curve_lo) == len(s.curve_class[0]) == 1
    s.fold({"event": "end", "status": "exploded"})
    assert s.status == "failed"


def test_runstate_regression():
    s = RunState()
    s.fold(start(task="regression", classes=[], class_rows=[]))
    s.fold(member(1, error=4.0, interval=[3.5, 4.5], class_error=[], confusion=None, r2=0.6))
    assert s.task == "regression" and s.classes == [] and s.class_figures() == []
    assert s.error == 4.0 and s.r2 == 0.6 and s.confusion is None and s.curve_r2[0] == pytest.approx(0.6)


def test_curve_of_100000_members_stays_small():
    s = RunState()
    s.fold(start(classes=["a", "b", "c"], class_rows=[1, 1, 1]))
    for m in range(1, 100_001):
        s.fold({"event": "member", "member": m, "error": 0.1, "interval": [0.09, 0.11],
                "class_error": [0.1, 0.2, 0.3]})
    # 4 + 8 + 3 * 4 + 4 + 3 * 4 bytes a member: about 4 MB (the brief: "a few MB at most").
    assert s.curve_bytes() < 4_500_000
    assert s.members == 100_000 and s.curve_member[-1] == 100_000


@pytest.mark.usefixtures("parser")
def test_read_state_reads_a_whole_run_directory(tmp_path):
    with JournalWriter(tmp_path / JOURNAL) as w:
        w.write("start", **{k: v for k, v in start().items() if k not in ("event", "t")})
        for m in range(1, 2001):
            w.write("member", **{k: v for k, v in member(m).items() if k not in ("event", "t")})
    s = read_state(tmp_path)
    assert s.members == 2000 and len(s.curve_member) == 2000


# ---------------------------------------------------------------- job status and stop requests

def dead_process():
    """The pid and start time of a process that has certainly ended."""
    p = subprocess.Popen([sys.executable, "-c", "import sys; sys.stdin.read()"], stdin=subprocess.PIPE)
    started = psutil.Process(p.pid).create_time()
    p.stdin.close()
    p.wait()
    return p.pid, started


def test_job_status_running_crashed_and_ended(tmp_path):
    (tmp_path / JOURNAL).write_text("")
    me = psutil.Process()
    host = os.uname().nodename
    s = RunState()
    s.fold(start(pid=me.pid, pid_started=me.create_time(), host=host))
    assert job_status(tmp_path, s) == "running"              # this very process: alive, no end line
    pid, started = dead_process()
    s.fold(start(pid=pid, pid_started=started, host=host))
    assert job_status(tmp_path, s) == "crashed"              # gone, no end line
    # A live pid with another start time is another process that reused the number.
    s.fold(start(pid=me.pid, pid_started=me.create_time() - 3600, host=host))
    assert job_status(tmp_path, s) == "crashed"
    s.fold(start(pid=pid, pid_started=started, host="some-other-host"))
    assert job_status(tmp_path, s) == "running"              # cannot be checked from here
    s.fold({"event": "end", "status": "stopped"})
    assert job_status(tmp_path, s) == "stopped"


def test_job_status_waiting_without_a_journal(tmp_path):
    assert job_status(tmp_path, RunState()) == "waiting"


def test_request_stop(tmp_path):
    assert not stop_requested(tmp_path)
    path = request_stop(tmp_path)
    assert path == tmp_path / "stop" and path.exists() and stop_requested(tmp_path)
    assert path.read_bytes() == b""                          # the spec: an empty file
    request_stop(tmp_path)                                   # asking twice is harmless
    assert sorted(p.name for p in tmp_path.iterdir()) == ["stop"]   # no temporary file left behind
    with pytest.raises(RunDirError) as err:
        request_stop(tmp_path / "missing")
    assert isinstance(err.value, BaggrError) and "missing" in str(err.value)


# ---------------------------------------------------------------- downsampling

@pytest.mark.parametrize("log", [False, True])
@pytest.mark.parametrize("n,width", [(5000, 200), (100_000, 120), (97, 40), (30, 40)])
def test_downsample_keeps_ends_and_each_buckets_extremes(n, width, log):
    rng = np.random.default_rng(n + width)
    ys = rng.normal(size=n)
    xs = np.arange(1, n + 1)
    out_x, out_y = downsample(list(xs), list(ys), width, log=log)
    assert len(out_x) <= width
    assert out_x[0] == 1 and out_x[-1] == n and out_y[0] == ys[0] and out_y[-1] == ys[-1]
    assert all(a < b for a, b in zip(out_x, out_x[1:]))
    assert np.array_equal(ys[np.array(out_x) - 1], np.array(out_y))   # points of the curve, unchanged
    if n > width:
        edges = bucket_edges(list(xs), bucket_plan(list(xs), width, log))
        starts = np.array([a for a, b in zip(edges, edges[1:]) if b > a])
        kept = set(out_y)
        # numpy as the reference: each bucket's min and max are among the points drawn.
        for v in np.minimum.reduceat(ys, starts):
            assert v in kept
        for v in np.maximum.reduceat(ys, starts):
            assert v in kept


def test_downsample_leaves_out_nan_and_cache_matches_a_fresh_pass():
    from array import array
    rng = np.random.default_rng(5)
    xs, ys, cache = array("i"), array("d"), {}
    for m in range(1, 20_001):
        xs.append(m)
        ys.append(math.nan if m <= 3 else float(rng.random()))
        if m % 997 == 0 or m == 20_000:
            # incremental (cached buckets) equals batch (common practice, no source)
            assert downsample(xs, ys, 150, cache=cache) == downsample(xs, ys, 150)
    out_x, out_y = downsample(xs, ys, 150)
    assert not any(math.isnan(v) for v in out_y) and out_x[0] == 4 and out_x[-1] == 20_000
    # numpy's nanmin/nanmax over the whole curve are among the points kept
    assert np.nanmin(np.array(ys)) in out_y and np.nanmax(np.array(ys)) in out_y


# ---------------------------------------------------------------- intervals

def test_wilson_interval_textbook_value():
    # Wilson (1927) score interval for 10 errors in 100 at 95%: [0.0552, 0.1744]
    # (e.g. Newcombe 1998, Stat. Med. 17:857, method 3; from memory, checked with scipy below).
    lo, hi = class_interval(0.10, 100)
    assert lo == pytest.approx(0.0552, abs=5e-5) and hi == pytest.approx(0.1744, abs=5e-5)
    assert class_interval(None, 100) is None and class_interval(0.1, 0) is None


def test_wilson_interval_against_scipy():
    stats = pytest.importorskip("scipy.stats")
    for k, n in [(10, 100), (0, 37), (37, 37), (120, 204), (3, 1000), (500, 1000)]:
        ref = stats.binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
        lo, hi = class_interval(k / n, n)
        assert lo == pytest.approx(ref.low, abs=1e-9) and hi == pytest.approx(ref.high, abs=1e-9)
