"""Run directories in-process: fingerprints, the lock, create/replace rules, checkpoint and restore,
a failing checkpoint write, the early-stop rule, the report's figures and the progress lines."""
import hashlib
import io
import json
import os

import numpy as np

import baggr
import pytest

import naive
from baggr.model import npzfile
from baggr.config import Config
from baggr.engine import Training
from baggr.errors import DataError, ModelFileError
from baggr.cli.progress import PlainProgress, RichProgress
from baggr.cli.report import curve_sizes, settled_at
from baggr.runs import (CHECKPOINT, Checkpointer, DiskFullError, Lock, RunDir, RunDirError, RunSettings,
                        check_data, create, default_run_dir, fingerprint, stable_now)


def test_fingerprint_is_the_sha256_of_the_bytes(tmp_path):
    p = tmp_path / "abc.csv"
    p.write_bytes(b"abc")
    f = fingerprint(p)
    # FIPS 180-2, appendix B.1: SHA-256("abc").
    assert f["sha256"] == "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    assert f["bytes"] == 3 and f["path"] == str(p.resolve())
    big = tmp_path / "big.bin"
    blob = np.random.default_rng(0).bytes(3 << 20)    # several read chunks
    big.write_bytes(blob)
    assert fingerprint(big)["sha256"] == hashlib.sha256(blob).hexdigest()
    with pytest.raises(DataError, match="file not found"):
        fingerprint(tmp_path / "nope.csv")


def test_check_data_names_a_changed_file(tmp_path):
    p = tmp_path / "d.csv"
    p.write_text("a,b\n1,2\n")
    info = fingerprint(p)
    assert check_data(info)["sha256"] == info["sha256"]
    p.write_text("a,b\n1,3\n")
    with pytest.raises(RunDirError, match="has changed since the run started"):
        check_data(info)


def test_lock_admits_one_holder_and_names_it(tmp_path):
    rd = create(tmp_path / "run")
    a = Lock(rd / "lock")
    try:
        assert rd.lock_holder() == os.getpid()
        with pytest.raises(RunDirError, match=rf"already running \(pid {os.getpid()}\)"):
            Lock(rd / "lock")            # a second open file: flock refuses it even in one process
    finally:
        a.release()
    assert rd.lock_holder() is None
    Lock(rd / "lock").release()


def test_create_never_replaces_without_force(tmp_path):
    rd = create(tmp_path / "run")
    (rd / "config.json").write_text("{}")
    with pytest.raises(RunDirError, match="already exists"):
        create(tmp_path / "run")
    assert create(tmp_path / "run", force=True).path == rd.path and not (rd / "config.json").exists()
    other = tmp_path / "mine"
    other.mkdir()
    (other / "notes.txt").write_text("keep me")
    with pytest.raises(RunDirError, match="not a baggr run directory"):
        create(other, force=True)
    assert (other / "notes.txt").read_text() == "keep me"
    (tmp_path / "file").write_text("x")
    with pytest.raises(RunDirError, match="cannot create the run directory"):
        create(tmp_path / "file" / "sub")


def test_default_run_dir_names_the_data_and_never_collides(tmp_path):
    a = default_run_dir("/data/firings.csv.gz", root=tmp_path)
    assert a.parent == tmp_path and a.name.startswith("firings-") and len(a.name) == len("firings-20250101-120000")
    a.mkdir()
    b = default_run_dir("/data/firings.csv.gz", root=tmp_path)
    assert b != a and b.name.startswith(a.name)


def _training(members=24, keep=True, n=300, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 5))
    y = (X[:, 0] - X[:, 2] + 0.5 * rng.normal(size=n) > 0).astype(int)
    return Training(X, y, Config(members=members, seed=4, keep_members=keep, threads=2))


@pytest.mark.parametrize("keep", [True, False])
@pytest.mark.parametrize("background", [True, False])
def test_checkpoint_then_restore_equals_an_uninterrupted_run(tmp_path, keep, background):
    full = _training(keep=keep)
    full_ens = full.run()
    rd = create(tmp_path / "run")
    settings = RunSettings(checkpoint_members=5, checkpoint_budget=None)
    first = _training(keep=keep)
    ck = Checkpointer(rd, first, settings, {"sha256": "x", "config": first.config.to_dict()}, background=background)

    def on_member(ev):
        if ck.due():
            ck.write()
    first.run(on_member=on_member, until=13)
    ck.wait()
    assert ck.member == 10 and ck.writes == 2         # at 5 and 10; 13 is past the last checkpoint
    later = _training(keep=keep)
    ck2 = Checkpointer(rd, later, settings, {"sha256": "x", "config": later.config.to_dict()})
    assert ck2.restore() and later.next_member == 10
    ens = later.run()
    a, b = full_ens.oob.arrays(), ens.oob.arrays()
    assert all(np.array_equal(a[k], b[k], equal_nan=True) for k in a)
    if keep:
        # the trees as the model file keeps and scoring walks them (chunk files keep no more)
        fa, fb = full_ens.compact.arrays, ens.compact.arrays
        assert all(np.array_equal(fa[k], fb[k]) for k in fa)
    else:
        assert not (rd / "members").exists()


def test_restore_refuses_other_settings_and_newer_formats(tmp_path):
    rd = create(tmp_path / "run")
    tr = _training()
    ck = Checkpointer(rd, tr, RunSettings(), {"sha256": "x", "config": tr.config.to_dict()}, background=False)
    tr.run(until=3)
    ck.write()
    other = Training(*_xy(), Config(members=24, seed=5, threads=2))
    with pytest.raises(ModelFileError, match="other settings"):
        Checkpointer(rd, other, RunSettings(), {"sha256": "x", "config": other.config.to_dict()}).restore()
    header, arrays = npzfile.read(rd / CHECKPOINT)
    npzfile.write_atomic(rd / CHECKPOINT, arrays, dict(header, format_version=header["format_version"] + 1))
    tr2 = _training()
    with pytest.raises(ModelFileError, match="newer baggr"):
        Checkpointer(rd, tr2, RunSettings(), {"sha256": "x", "config": tr2.config.to_dict()}).restore()


def _xy(n=300, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 5))
    y = (X[:, 0] - X[:, 2] + 0.5 * rng.normal(size=n) > 0).astype(int)
    return X, y


def test_a_failed_checkpoint_write_leaves_the_previous_one_intact(tmp_path, monkeypatch):
    rd = create(tmp_path / "run")
    tr = _training()
    ck = Checkpointer(rd, tr, RunSettings(), {"sha256": "x", "config": tr.config.to_dict()})
    tr.run(until=4)
    ck.write(wait=True)
    before = (rd / CHECKPOINT).read_bytes()
    tr.run(until=8)
    monkeypatch.setenv("BAGGR_FAULT_CHECKPOINT", "enospc:2")
    with pytest.raises(DiskFullError, match="disk full"):
        ck.write(wait=True)
    assert (rd / CHECKPOINT).read_bytes() == before and ck.member == 4
    assert not list(rd.path.rglob(".tmp-*"))
    monkeypatch.delenv("BAGGR_FAULT_CHECKPOINT")
    ck.write(wait=True)                                # space again: the next write works
    assert npzfile.read(rd / CHECKPOINT)[0]["next_member"] == 8


def test_stable_rule_matches_its_definition():
    rng = np.random.default_rng(1)
    s = RunSettings(stop_when_stable=True)
    refit_at = [32, 64, 128, 256, 512, 1024]
    for trial in range(60):
        # members_needed estimates that wander and then (sometimes) settle
        settle = rng.choice([0.02, 0.08, 0.3])
        base = int(rng.integers(20, 400))
        needed = [[a, int(base * (1 + rng.normal(0, settle)))] for a in refit_at]
        if trial % 7 == 0:
            needed[-4][1] = -1                      # beyond reach once
        for m in range(1, 1100):
            got = stable_now(needed, m, s) is not None
            assert got == naive.stable_rule(needed, m), (trial, m)


def test_stable_rule_needs_three_agreeing_refits_and_the_members():
    s = RunSettings(stop_when_stable=True)
    needed = [[16, 900], [32, 200], [64, 205], [128, 190], [256, 205]]
    # refits at 32, 64 and 128 agree within 10% of 190: stop once 190 members are there
    assert stable_now(needed[:4], 189, s) is None and stable_now(needed[:4], 190, s) is not None
    needed = [[32, 100], [64, 160], [128, 60], [256, 62], [512, 61]]
    assert stable_now(needed[:4], 256, s) is None     # 160 and 62 disagree
    assert stable_now(needed, 512, s) is not None     # 60, 62, 61 agree; 512 >= 61: at once
    # small figures agree within 16 members: 8, 14 and 20
    assert stable_now([[32, 8], [64, 14], [128, 20]], 128, s) is not None


def test_settled_at_matches_its_definition():
    rng = np.random.default_rng(2)
    for trial in range(60):
        m = int(rng.integers(1, 80))
        curve = list(0.2 + 0.1 * np.exp(-np.arange(m) / 10.0) + rng.normal(0, 0.01, m))
        lo, hi = curve[-1] - 0.02, curve[-1] + 0.02
        assert settled_at(curve, lo, hi) == naive.settled_at(curve, lo, hi)
    assert settled_at([0.5, float("nan"), 0.2], 0.1, 0.3) == 3


def test_curve_sizes():
    assert curve_sizes(1) == [1]
    assert curve_sizes(40) == [1, 5, 10, 25, 40]
    assert curve_sizes(500) == [1, 5, 10, 25, 50, 100, 250, 500]


def _member(m, target=100, err=0.15):
    return {"member": m, "elapsed": m * 0.5, "error": err, "interval": [err - 0.02, err + 0.02],
            "coverage": min(1.0, m / 10), "rate": 2.0}


def test_plain_progress_prints_every_n_members_or_ten_seconds():
    out = io.StringIO()
    clock = [0.0]
    p = PlainProgress(out, get_time=lambda: clock[0])
    p.begin({"task": "classes", "classes": ["a", "b"], "members_target": 400, "rows": 10, "features": 2,
             "threads": 2, "first_member": 0})
    for m in range(1, 401):
        clock[0] = m * 0.01 if m < 300 else 3.0 + (m - 300) * 1.0   # slow after 300: one line per 10 s
        p.member(_member(m, 400))
    p.end({})
    lines = out.getvalue().splitlines()
    shown = [int(ln.split()[1].split("/")[0]) for ln in lines[1:]]
    # Every max(10, 400 // 20) = 20 members while fast, every 10 s (10 members at 1 s each) while slow.
    assert shown[:3] == [1, 21, 41] and 400 in shown
    slow = [m for m in shown if m > 300][:-1]         # the last line is the last member, whenever it comes
    assert all(b - a == 10 for a, b in zip(slow, slow[1:]))
    assert "\x1b" not in out.getvalue()
    # shares as percentages, as on the dashboard and in the report text (issue 15)
    assert "OOB error 15.00% (95% 13.0-17.0%)" in lines[1] and "member   1/400" in lines[1]
    assert "2.00 members/s" in lines[1] and "coverage 10.0%" in lines[1]


def test_plain_progress_shows_the_chosen_measure_at_its_latest_point():
    out = io.StringIO()
    p = PlainProgress(out, get_time=lambda: 0.0)
    p.begin({"task": "classes", "classes": ["a", "b"], "members_target": 60, "rows": 10, "features": 2,
             "threads": 1, "first_member": 0, "config": {"measure": "auc"}})
    for m in range(1, 61):
        f = _member(m, 60)
        if m in (1, 40, 42):     # measures ride on the member lines at scheduled sizes only
            f["measures"] = {"error": [0.15, 0.13, 0.17], "auc": [0.9 + m / 1000, 0.88, 0.93]}
        p.member(f)
    p.end({})
    lines = out.getvalue().splitlines()
    assert lines[0].endswith("1 threads, judged by AUC")
    assert "OOB error 15.00% (95% 13.0-17.0%)  AUC 0.9010 (95% 0.8800-0.9300)  coverage" in lines[1]
    # member 41's line: the latest point is member 40's, and says so; the last line has member 42's
    at41 = next(ln for ln in lines if ln.startswith("member 41/"))
    assert "AUC 0.9400 (95% 0.8800-0.9300) at 40 members" in at41
    assert "AUC 0.9420 (95% 0.8800-0.9300) at 42 members" in lines[-1]
    # the error (the default) is on every line already: no second figure
    out = io.StringIO()
    p = PlainProgress(out, get_time=lambda: 0.0)
    p.begin({"task": "classes", "classes": ["a", "b"], "members_target": 5, "rows": 10, "features": 2,
             "threads": 1, "first_member": 0, "config": {"measure": None}})
    p.member({**_member(1, 5), "measures": {"error": [0.15, 0.13, 0.17], "auc": [0.9, 0.88, 0.93]}})
    assert "AUC" not in out.getvalue() and "judged by" not in out.getvalue()


def test_rich_progress_draws_the_bar():
    from rich.console import Console
    buf = io.StringIO()
    p = RichProgress(Console(file=buf, force_terminal=True, width=120))
    p.begin({"task": "classes", "members_target": 50, "first_member": 0})
    p.member(_member(20, 50))
    p.note("SIGINT: stopping [after] the member in hand")
    p.close()
    text = buf.getvalue()
    assert "20/50" in text and "OOB error 15.00%" in text and "━" in text
    assert "stopping [after] the member" in text              # notes are printed as they are (no markup)


@pytest.mark.parametrize("width", [120, 100, 80, 60, 40, 30, 20])
def test_the_progress_line_drops_fields_by_rank_members_and_error_last(width):
    # At 80 columns the old bar line lost its bar and member count ("training OOB error 0.1395 ... le…").
    from baggr.cli.progress import BAR, fit_line, line_parts
    f = {"member": 634, "elapsed": 125.3, "error": 0.138812, "interval": [0.1213, 0.1561], "coverage": 1.0,
         "rate": 5.07}
    parts = line_parts(f, "classes", 3000, "training")
    text = fit_line(parts, width, 634 / 3000).plain
    assert len(text) <= width and "…" not in text
    shown = [p for p in parts if (p[2] is BAR and "━" in text) or (p[2] is not BAR and p[2] in text)]
    ranks = sorted(p[0] for p in shown)
    assert ranks == sorted(p[0] for p in parts)[:len(ranks)]   # whole fields, strictly the most important ones
    assert "634/3,000" in text                               # members done: the last to go
    if width >= 30:
        assert "OOB error 13.88%" in text                    # and the error next
    if width >= 40:
        assert "━" in text                                   # then the bar
    if width >= 80:
        assert "21%" in text and "left" in text and "(95% 12.1-15.6%)" in text


def test_run_dir_require_names_the_problem(tmp_path):
    with pytest.raises(RunDirError, match="no run directory at"):
        RunDir(tmp_path / "nope").require()
    (tmp_path / "f").write_text("x")
    with pytest.raises(RunDirError, match="is a file"):
        RunDir(tmp_path / "f").require()
    with pytest.raises(RunDirError, match="not a baggr run directory"):
        RunDir(tmp_path).require()
    rd = create(tmp_path / "r")
    (rd / "config.json").write_text(json.dumps({"nope": 1}))
    with pytest.raises(RunDirError, match="damaged"):
        rd.read_config()


def test_watch_without_the_dashboard_follows_the_journal(tmp_path, monkeypatch, capsys):
    import sys

    from baggr.cli import main as cli
    from baggr.runs.journal import JournalWriter
    monkeypatch.setitem(sys.modules, "tui.app", None)        # as if the dashboard could not be imported
    rd = create(tmp_path / "run")
    with JournalWriter(rd / "journal.jsonl") as j:
        j.write("start", task="classes", classes=["a", "b"], members_target=3, first_member=0, rows=9,
                features=2, threads=1, pid=1, pid_started=0.0)
        for m in (1, 2, 3):
            j.write("member", **_member(m, 3, err=0.25))
        j.write("end", status="finished", reason="reached 3 members", member=3, elapsed=1.5)
    assert cli.main(["watch", str(rd.path)]) == 0
    out = capsys.readouterr().out
    assert "member 1/3" in out and "member 3/3 100%" in out and "OOB error 25.00%" in out


def test_a_stop_turns_the_trees_file_into_the_model_and_resume_reads_them_back(tmp_path):
    full_ens = _training().run()
    rd = create(tmp_path / "run")
    extra = {"sha256": "x", "config": _training().config.to_dict()}

    def stop_at(tr, ck, m):
        tr.run(until=m)
        ck.write(wait=True)
        ck.finish_model(tr.ensemble(trees=False))

    first = _training()
    ck = Checkpointer(rd, first, RunSettings(), extra, background=False)
    stop_at(first, ck, 7)
    # one copy of the trees: the model; the checkpoint's trees file is it, renamed
    assert not any((rd / "members").glob("*")) and (rd / "model.npz").exists()
    assert npzfile.read(rd / CHECKPOINT)[0]["trees"]["parts"] == [[0, 7]]
    seven = baggr.load(rd / "model.npz")
    X, _ = _xy()
    np.testing.assert_array_equal(seven.vote_shares(X), full_ens.vote_shares(X, members=7))
    second = _training()
    ck2 = Checkpointer(rd, second, RunSettings(), extra, background=False)
    assert ck2.restore() and second.next_member == 7
    assert (rd / "model.npz").exists()          # the model stays until the resumed run appends
    stop_at(second, ck2, 13)
    assert npzfile.read(rd / CHECKPOINT)[0]["trees"]["parts"] == [[0, 7], [7, 13]]
    third = _training()
    ck3 = Checkpointer(rd, third, RunSettings(), extra, background=False)
    assert ck3.restore() and third.next_member == 13
    ens = third.run()
    for k, v in full_ens.compact.arrays.items():
        np.testing.assert_array_equal(ens.compact.arrays[k], v, err_msg=k)
    for k, v in full_ens.oob.arrays().items():
        np.testing.assert_array_equal(ens.oob.arrays()[k], v, err_msg=k)


def test_a_checkpoint_naming_a_model_with_too_few_members_is_refused(tmp_path):
    rd = create(tmp_path / "run")
    extra = {"sha256": "x", "config": _training().config.to_dict()}
    tr = _training()
    ck = Checkpointer(rd, tr, RunSettings(checkpoint_members=50), extra, background=False)
    tr.run(until=6)
    ck.write(wait=True)
    ck.finish_model(tr.ensemble(trees=False))
    short = _training(members=24)
    short.run(until=4)
    short.ensemble().save(rd / "model.npz")       # replaced by a model of 4 members
    again = _training()
    with pytest.raises(ModelFileError, match="holds 4 members, the checkpoint 6"):
        Checkpointer(rd, again, RunSettings(), extra, background=False).restore()
