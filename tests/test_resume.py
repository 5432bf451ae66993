"""Runs you can leave and come back to: kill -9 at any moment, signals, stop requests, a full disk, then resume.

Every scenario drives the real `baggr` executable in subprocesses and compares the resumed run
with one never interrupted: members are pure functions of (seed, m), so the model file's arrays,
the OOB curve and the predictions must be bit-identical (only timestamps and timings may differ).
The scenarios run two at a time (a subprocess spends most of its ~2 s importing); each test
checks its own scenario's outcome.
"""
import json
import os
import shlex
import shutil
import signal
import subprocess
import sys
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pytest

from baggr.runs import journal
from baggr.model import npzfile
from model_files import read_joined
from baggr.model.ensemble import load
from baggr.runs import CHECKPOINT, Lock, MODEL, RunDir
from generators import noisy_halves

BAGGR = [sys.executable, "-m", "baggr.cli"]
MEMBERS = 30
# Timing fields of the model header: the only ones allowed to differ after a resume.
TIMES = {"grow_seconds", "fold_seconds", "keep_seconds", "measure_seconds", "importance_seconds", "seconds"}


def baggr(*args, env=None, timeout=120, cwd=None):
    e = dict(os.environ, **(env or {}))
    return subprocess.run([*BAGGR, *map(str, args)], capture_output=True, text=True, timeout=timeout, env=e, cwd=cwd)


def start(*args, env=None):
    e = dict(os.environ, **(env or {}))
    return subprocess.Popen([*BAGGR, *map(str, args)], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            env=e)


def events(rd):
    return journal.JournalReader(Path(rd) / "journal.jsonl").read_new()


def journal_members(rd) -> int:
    ms = [ev["member"] for ev in events(rd) if ev["event"] == "member"]
    return ms[-1] if ms else 0


def wait_members(rd, k, proc, timeout=60.0) -> int:
    """Poll the journal until it shows k members (the job must still be running then)."""
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        m = journal_members(rd)
        if m >= k:
            return m
        assert proc.poll() is None, f"the job ended before {k} members: {proc.communicate()}"
        time.sleep(0.001)
    raise AssertionError(f"no {k} members after {timeout} s")


def assert_same_model(a, b):
    """The two model files hold the same arrays bit for bit and the same header apart from times."""
    ha, aa = read_joined(a)
    hb, ab = read_joined(b)
    assert sorted(aa) == sorted(ab)
    for k in aa:
        assert aa[k].dtype == ab[k].dtype and np.array_equal(aa[k], ab[k], equal_nan=True), k
    for k in set(ha) | set(hb):
        if k == "created":
            continue
        if k == "stats":
            sa = {x: v for x, v in ha[k].items() if x not in TIMES}
            sb = {x: v for x, v in hb[k].items() if x not in TIMES}
            assert sa == sb
        else:
            assert ha[k] == hb[k], k


@pytest.fixture(scope="module")
def medium(tmp_path_factory):
    """20,000 rows x 6 features, two classes with 40% of labels redrawn: about 10 ms a member on 2 cores."""
    d = tmp_path_factory.mktemp("resume")
    cols = noisy_halves(20_000, seed=7)
    path = d / "medium.csv"
    pacsv.write_csv(pa.table(cols), path)
    return d, path


@pytest.fixture(scope="module")
def reference(medium):
    """An uninterrupted run of MEMBERS members, to compare every resumed run with (in this process: it also
    warms the numba cache before subprocesses run two at a time)."""
    from baggr.cli import main as cli
    d, data = medium
    rd = d / "reference"
    code = cli.main([str(a) for a in ("train", data, "--target", "label", "--members", MEMBERS, "--threads", 2,
                                      "--run-dir", rd, "--no-ui")])
    assert code == 0
    return rd


def train_args(data, rd, *extra):
    return ("train", data, "--target", "label", "--members", MEMBERS, "--threads", 2, "--run-dir", rd,
            "--no-ui", "--checkpoint-every", 4, *extra)


def check_resumes_identically(rd, reference):
    r = baggr("resume", rd, "--no-ui")
    assert r.returncode == 0, r.stderr
    assert "finished" in r.stdout
    assert_same_model(rd / MODEL, reference / MODEL)
    # Predictions of new rows agree too (they follow from the trees, checked here end to end).
    X = np.random.default_rng(3).normal(size=(200, 6))
    new = {f"f{j}": X[:, j] for j in range(6)}
    assert np.array_equal(load(rd / MODEL).vote_shares(new), load(reference / MODEL).vote_shares(new))
    # The journal, read the dashboard's way, ends with the same curve as the uninterrupted run's.
    a, b = journal.read_state(rd), journal.read_state(reference)
    assert a.status == "finished" and a.members == MEMBERS
    assert list(a.curve_member) == list(range(1, MEMBERS + 1))
    assert list(a.curve_error) == list(b.curve_error)
    assert not (rd / CHECKPOINT).exists() and not (rd / "members").exists()   # model.npz holds it all now
    assert not (rd / CHECKPOINT).exists() and not (rd / "members").exists()   # model.npz holds it all now


SCENARIOS = {}


def scenario(name):
    def register(fn):
        SCENARIOS[name] = fn
        return fn
    return register


def _kill_at(at):
    def run(data, rd, reference):
        proc = start(*train_args(data, rd))
        seen = wait_members(rd, at, proc)
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=30)
        assert proc.returncode == -signal.SIGKILL
        assert seen < MEMBERS
        assert not any(ev["event"] == "end" for ev in events(rd))           # killed: no end line
        assert journal.job_status(rd, journal.read_state(rd)) == "crashed"
        if at == 20:
            with open(rd / "journal.jsonl", "ab") as f:
                f.write(b'{"event":"member","t":1.0,"memb')    # a line cut off by the kill
        # A report of the unfinished run works from its checkpoint (checked once: a subprocess costs ~2 s).
        if at == 11 and (rd / CHECKPOINT).exists():
            r = baggr("report", rd, "--json")
            assert r.returncode == 0, r.stderr
            fig = json.loads(r.stdout)
            assert fig["source"] == "checkpoint" and fig["members"] % 4 == 0 and len(fig["curve"]) == fig["members"]
        check_resumes_identically(rd, reference)
        if at == 20:   # the torn line was ended before the resumed job wrote its start line
            reader = journal.JournalReader(rd / "journal.jsonl")
            evs = reader.read_new()
            assert reader.malformed == 1
            assert [ev.get("resumed", False) for ev in evs if ev["event"] == "start"] == [False, True]
    return run


for _at in (3, 11, 20):
    scenario(f"kill {_at}")(_kill_at(_at))


def _fragile(point):
    def run(data, rd, reference):
        r = baggr(*train_args(data, rd), env={"BAGGR_FAULT_KILL": point})
        assert r.returncode == -signal.SIGKILL
        trees = rd / "members" / "trees.npz"
        if point == "chunk:2":
            # the second checkpoint's trees were appended, but its checkpoint never was written
            end = npzfile.read(rd / CHECKPOINT)[0]["trees"]["end"]
            size = trees.stat().st_size
            assert size > end
            # and a write torn half way through them (as by a kill or a power cut mid-write)
            os.truncate(trees, (end + size) // 2)
        if point in ("final:1", "final:2"):
            # the last trees appended (final:1), or the whole model too but not yet renamed (final:2)
            assert trees.exists() and not (rd / MODEL).exists()
        if point == "model":
            assert (rd / MODEL).exists() and not any(ev["event"] == "end" for ev in events(rd))
        check_resumes_identically(rd, reference)
    return run


for _p in ("chunk:2", "final:1", "final:2", "model"):
    scenario(f"fragile {_p}")(_fragile(_p))


def _stop(how):
    def run(data, rd, reference):
        proc = start(*train_args(data, rd))
        wait_members(rd, 5, proc)
        if how == "stop file":
            journal.request_stop(rd)
        else:
            proc.send_signal(getattr(signal, how))
        out, err = proc.communicate(timeout=60)
        assert proc.returncode == 0, err
        reason = "stop requested" if how == "stop file" else how
        last = out.strip().splitlines()[-1]
        assert last.startswith("stopped at ") and reason in last
        end = [ev for ev in events(rd) if ev["event"] == "end"]
        assert len(end) == 1 and end[0]["status"] == "stopped" and end[0]["reason"] == reason
        m = end[0]["member"]
        assert 5 <= m < MEMBERS
        # The member in hand was finished, then checkpoint and model were written at exactly that size.
        assert load(rd / MODEL).members == m
        header = npzfile.read(rd / CHECKPOINT)[0]
        assert header["next_member"] == m
        # one copy of the trees: the checkpoint takes them from the model, no other tree file is left
        assert header["trees"]["parts"][-1][1] == m and not any((rd / "members").glob("*"))
        assert not (rd / "stop").exists()
        if how in ("SIGINT", "stop file"):            # the others leave the very same files behind
            check_resumes_identically(rd, reference)
    return run


for _h in ("SIGINT", "SIGTERM", "SIGHUP", "stop file"):
    scenario(f"stop {_h}")(_stop(_h))


@scenario("disk full")
def _disk_full(data, rd, reference):
    r = baggr(*train_args(data, rd), env={"BAGGR_FAULT_CHECKPOINT": "enospc:3"})
    assert r.returncode == 2
    assert r.stderr.count("\n") == 1 and r.stderr.startswith("baggr: error: disk full") and "Traceback" not in r.stderr
    end = [ev for ev in events(rd) if ev["event"] == "end"]
    assert end[-1]["status"] == "failed" and "disk full" in end[-1]["reason"]
    header, _ = npzfile.read(rd / CHECKPOINT, "checkpoint file")        # the second checkpoint, intact
    assert header["next_member"] == 8
    assert not [p for p in rd.rglob(".tmp-*")]
    check_resumes_identically(rd, reference)


@scenario("changed data")
def _changed_data(data, rd, reference):
    copy = rd.parent / "copy.csv"
    copy.write_bytes(data.read_bytes())
    r = baggr(*train_args(copy, rd), env={"BAGGR_FAULT_KILL": "member:6"})
    assert r.returncode == -signal.SIGKILL
    with open(copy, "a") as f:
        f.write("0,0,0,0,0,0,no\n")
    r = baggr("resume", rd, "--no-ui")
    assert r.returncode == 2 and "changed since the run started" in r.stderr and r.stderr.count("\n") == 1
    copy.unlink()
    r = baggr("resume", rd, "--no-ui")
    assert r.returncode == 2 and "no longer exists" in r.stderr


@pytest.fixture(scope="module")
def outcomes(medium, reference, tmp_path_factory):
    """Every scenario, two at a time; a test's .result() re-raises its scenario's failure."""
    _, data = medium
    pool = ThreadPoolExecutor(max_workers=2)
    futures = {}
    for name, fn in SCENARIOS.items():
        rd = tmp_path_factory.mktemp(name.replace(" ", "-").replace(":", "-")) / "run"
        futures[name] = pool.submit(fn, data, rd, reference)
    yield futures
    pool.shutdown(wait=True)


@pytest.mark.parametrize("at", [3, 11, 20])
def test_kill_9_then_resume_is_bit_identical(outcomes, at):
    """3: before the first checkpoint; 11: report from the checkpoint; 20: plus a torn last journal line."""
    outcomes[f"kill {at}"].result()


@pytest.mark.parametrize("point", ["chunk:2", "final:1", "final:2", "model"])
def test_kill_at_fragile_points_then_resume(outcomes, point):
    """SIGKILL between trees appended and their checkpoint (then the append torn half way), in the
    model's final write (after its last trees; after its rest, before the rename), and between the
    model file and the end line."""
    outcomes[f"fragile {point}"].result()


@pytest.mark.parametrize("how", ["SIGINT", "SIGTERM", "SIGHUP", "stop file"])
def test_stop_saves_and_resume_finishes_identically(outcomes, how):
    outcomes[f"stop {how}"].result()


def test_disk_full_keeps_previous_checkpoint_and_resume_works(outcomes):
    outcomes["disk full"].result()


def test_resume_refuses_changed_data_and_says_why(outcomes):
    outcomes["changed data"].result()


def test_resume_of_a_finished_run_says_so(reference):
    before = (reference / MODEL).read_bytes()
    r = baggr("resume", reference, "--no-ui")
    assert r.returncode == 0 and "is finished" in r.stdout
    assert (reference / MODEL).read_bytes() == before


def test_one_job_per_run_directory(medium, reference):
    _, data = medium
    lock = Lock(RunDir(reference) / "lock")       # this process plays a job running there
    try:
        r = baggr("resume", reference, "--no-ui")
        assert r.returncode == 2 and f"already running (pid {os.getpid()})" in r.stderr
        r = baggr(*train_args(data, reference, "--force"))
        assert r.returncode == 2 and f"already running (pid {os.getpid()})" in r.stderr
        assert (reference / MODEL).exists()       # --force did not replace a busy run
    finally:
        lock.release()


@pytest.mark.skipif(not shutil.which("tmux"), reason="needs tmux for a terminal")
def test_on_a_terminal_the_job_outlives_the_dashboard_and_the_terminal(medium, tmp_path):
    """The SSH-drop story: train on a terminal, leave the dashboard, close the terminal, the job goes on."""
    _, data = medium
    rd = tmp_path / "run"
    done = tmp_path / "exit"
    name = f"baggr-test-{os.getpid()}"
    cmd = " ".join(shlex.quote(str(a)) for a in (*BAGGR, "train", data, "--target", "label", "--members", 100_000,
                                                 "--run-dir", rd))
    subprocess.run(["tmux", "new-session", "-d", "-s", name, "-x", "120", "-y", "40",
                    f"{cmd}; echo $? > {shlex.quote(str(done))}; sleep 60"], check=True)
    try:
        t0 = time.monotonic()
        while journal_members(rd) < 20:
            assert time.monotonic() - t0 < 60, "the detached job did not start"
            time.sleep(0.1)
        st = journal.read_state(rd)
        assert os.getsid(st.pid) == st.pid            # the job leads its own session: no terminal's SIGHUP reaches it
        time.sleep(1.0)                               # let the dashboard draw before leaving it
        subprocess.run(["tmux", "send-keys", "-t", name, "q"], check=True)
        while not done.exists() or not done.read_text().strip():
            assert time.monotonic() - t0 < 60, "leaving the dashboard did not end the command"
            time.sleep(0.1)
        assert done.read_text().strip() == "0"
        pane = subprocess.run(["tmux", "capture-pane", "-p", "-J", "-t", name], capture_output=True, text=True).stdout
        said = " ".join(pane.split())
        assert f"the job goes on (pid {st.pid})" in said and f"Stop it: baggr stop {rd}" in said
        assert f"watch again: baggr watch {rd}" in said
    except BaseException:
        subprocess.run(["tmux", "kill-session", "-t", name])
        if rd.is_dir():
            journal.request_stop(rd)                  # do not leave a detached job running after a failure
        raise
    subprocess.run(["tmux", "kill-session", "-t", name])         # the terminal goes away
    before = journal_members(rd)
    time.sleep(1.0)
    st = journal.read_state(rd)
    assert journal.job_status(rd, st) == "running" and st.members > before
    r = baggr("stop", rd, "--wait")
    assert r.returncode == 0 and "stop requested" in r.stdout
    end = [ev for ev in events(rd) if ev["event"] == "end"]
    assert end[-1]["status"] == "stopped" and load(rd / MODEL).members == end[-1]["member"]
