"""The `baggr` command end to end: every command's help, the figures it prints, the files it writes, and
one clear line (exit code 2, no traceback) for every mistake a user can make, all through the real
executable in subprocesses."""
import json
import os
import re
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
import pytest

import naive
from generators import noisy_halves
from baggr.model import npzfile
from baggr.cli.main import COMMANDS
from baggr.config import Config
from baggr.engine import train
from baggr.model.ensemble import load
from baggr.runs import MODEL, RunDir, RunSettings, create, fingerprint, init_config

BAGGR = [sys.executable, "-m", "baggr.cli"]
ROOT = Path(__file__).resolve().parent.parent


def baggr(*args, timeout=180, cwd=None, env=None):
    return subprocess.run([*BAGGR, *map(str, args)], capture_output=True, text=True, timeout=timeout, cwd=cwd,
                          env=dict(os.environ, **(env or {})))


def write_csv(path, cols):
    pacsv.write_csv(pa.table(cols), path)
    return path


def two_classes(n, seed, p=4):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p)).round(4)
    y = np.where(X[:, 0] + 0.5 * X[:, 1] + 0.7 * rng.normal(size=n) > 0, "yes", "no")
    return {**{f"f{j}": X[:, j] for j in range(p)}, "label": y}


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    d = tmp_path_factory.mktemp("cli")
    f = {"dir": d}
    f["small"] = write_csv(d / "small.csv", two_classes(300, 1))
    f["new"] = write_csv(d / "new.csv", {k: v for k, v in two_classes(57, 2).items() if k != "label"})
    return f


@pytest.fixture(scope="module")
def run(files):
    """A finished run on small.csv (also warms the numba cache before anything runs in parallel)."""
    rd = files["dir"] / "run"
    r = baggr("train", files["small"], "--target", "label", "--members", 40, "--run-dir", rd, "--seed", 3)
    assert r.returncode == 0, r.stderr
    return rd, r


# ---------------------------------------------------------------- commands and help

@pytest.mark.parametrize("command", COMMANDS)
def test_every_command_has_help_with_an_example_and_is_in_the_readme(command):
    r = baggr(command, "--help")
    assert r.returncode == 0 and f"baggr {command}" in r.stdout and "example:" in r.stdout
    readme = (ROOT / "README.md").read_text()
    assert re.search(rf"\bbaggr {command}\b", readme), f"README.md does not mention `baggr {command}`"


def test_top_level_help_lists_the_commands():
    r = baggr("--help")
    assert r.returncode == 0 and all(c in r.stdout for c in COMMANDS) and "_job" not in r.stdout


def test_train_prints_the_run_dir_first_and_plain_lines_without_escape_codes(run):
    rd, r = run
    lines = r.stdout.splitlines()
    assert lines[0] == str(rd)
    assert "\x1b" not in r.stdout                               # not a terminal: no escape codes
    progress = [ln for ln in lines if ln.startswith("member ")]
    # One line per 10 members (max(10, 40 // 20)) plus the first: 1, 11, 21, 31, and the last, 40.
    assert [int(ln.split()[1].split("/")[0]) for ln in progress] == [1, 11, 21, 31, 40]
    assert lines[-1].startswith("finished: 40 members")
    cfg = json.loads((rd / "config.json").read_text())
    fp = fingerprint(cfg["data"]["path"])
    assert cfg["data"]["sha256"] == fp["sha256"] and cfg["data"]["rows"] == 300 and cfg["data"]["features"] == 4
    assert cfg["config"]["members"] == 40 and cfg["target"] == "label"


# ---------------------------------------------------------------- report

def test_report_json_figures_agree_with_a_recount(run, files):
    rd, _ = run
    r = baggr("report", rd, "--json")
    assert r.returncode == 0, r.stderr
    fig = json.loads(r.stdout)
    ens = load(rd / MODEL)
    y = pacsv.read_csv(files["small"]).column("label").to_pylist()
    pred = list(ens.oob.prediction)
    assert fig["members"] == 40 and len(fig["curve"]) == 40 and len(fig["raw_curve"]) == 40
    assert fig["curve"] == [float(v) for v in ens.oob.curve]
    assert fig["raw_curve"] == [float(v) for v in ens.oob.raw_curve]
    # The textbook OOB error is the misclassification rate over rows with an OOB vote (its definition).
    assert fig["raw_error"] == pytest.approx(naive.oob_error_rate(pred, y), abs=1e-12)
    assert fig["raw_curve"][-1] == fig["raw_error"]
    covered = [p is not None for p in pred]
    wrong = sum(p != t for p, t in zip(pred, y) if p is not None)
    assert fig["coverage"] == pytest.approx(sum(covered) / len(y), abs=1e-12)
    # Wilson's score interval (Wilson 1927) of wrong / covered.
    assert fig["raw_interval"] == pytest.approx(list(naive.wilson_interval(wrong, sum(covered))), abs=1e-12)
    for k, c in enumerate(fig["classes"]):
        rows = [(p, t) for p, t in zip(pred, y) if t == c and p is not None]
        assert fig["raw_class_error"][k] == pytest.approx(sum(p != t for p, t in rows) / len(rows), abs=1e-12)
    # The keys kept their meaning with the estimate of the kept ensemble: its error, its interval,
    # the curve's last point; the limit and members_needed as the ensemble computes them.
    assert fig["estimate"] == "kept ensemble"
    assert fig["oob_error"] == ens.oob.error == fig["curve"][-1]
    assert fig["interval"] == list(ens.oob.interval)
    assert fig["class_error"] == [float(v) for v in ens.oob.class_error]
    assert fig["error_limit"] == ens.oob.error_limit and fig["members_needed"] == ens.oob.members_needed
    assert fig["error_limit_interval"][0] <= fig["error_limit"] <= fig["error_limit_interval"][1]
    lo, hi = fig["interval"]
    assert fig["settled_at"] == naive.settled_at(fig["curve"], lo, hi)
    assert fig["data"]["sha256"] == fingerprint(files["small"])["sha256"]


def test_report_tables_say_the_figures_and_the_cautions(run):
    rd, _ = run
    r = baggr("report", rd)
    assert r.returncode == 0, r.stderr
    fig = json.loads(baggr("report", rd, "--json").stdout)
    text = r.stdout
    assert "\x1b" not in text
    # percentages in the text, fractions in the JSON (issue 15)
    lo, hi = fig["interval"]
    assert f"{100 * fig['oob_error']:.2f}%" in text and f"{100 * lo:.2f}-{100 * hi:.2f}%" in text
    assert 0 <= fig["oob_error"] <= 1 and 0 <= fig["coverage"] <= 1
    assert all(c in text for c in ("Per class", "Read with care", "Settled at", fig["data"]["sha256"]))
    flat = " ".join(text.split())                                     # the cautions wrap to the width
    assert "patient" in flat and "drift" in flat and "people, money or safety" in flat and "0.37 b members" in flat
    assert f"Textbook OOB {100 * fig['raw_error']:.2f}%" in flat and f"Error limit {100 * fig['error_limit']:.2f}%" in flat
    assert f"Members needed {fig['members_needed']:,}" in flat
    assert not [ln for ln in text.splitlines() if ln != ln.rstrip()]   # no line ends in spaces


def test_report_gives_each_class_its_figures_and_where_its_votes_went(run):
    # Every fact of the per-class table and the confusion matrix, each class in words (issue 15):
    # its error, interval, rows, share, then "N judged: R right · C as OTHER".
    rd, _ = run
    fig = json.loads(baggr("report", rd, "--json").stdout)
    lines = baggr("report", rd).stdout.splitlines()
    total = sum(fig["class_rows"])
    for k, name in enumerate(fig["classes"]):
        i = next(i for i, ln in enumerate(lines) if ln.split()[:2] == [name, "error"])
        first, votes = " ".join(lines[i].split()), " ".join(lines[i + 1].split())
        lo, hi = fig["class_interval"][k]
        assert f"error {100 * fig['class_error'][k]:.2f}%" in first
        assert f"95% {100 * lo:.2f}-{100 * hi:.2f}%" in first
        assert f"{fig['class_rows'][k]:,} rows {100 * fig['class_rows'][k] / total:.1f}% of all" in first
        row = fig["confusion"][k]
        other = [(c, fig["classes"][j]) for j, c in enumerate(row) if j != k]
        assert votes == f"{sum(row):,} judged: {row[k]:,} right · " + " · ".join(f"{c:,} as {n}" for c, n in other)
    # the error by ensemble size, each beside its interval drawn on one scale
    size = next(ln for ln in lines if ln.split()[:1] == ["40"])
    assert f"{100 * fig['curve'][39]:.2f}%" in size and "●" in size and "├" in size and "┤" in size


def test_report_of_a_running_job_shows_the_journals_latest_figures(files, tmp_path):
    # The job dies at member 47 with its checkpoints every 20; its start line is then given this
    # process's pid, so the run reads as running (job_status checks the pid and its start time).
    import psutil
    rd = tmp_path / "live"
    r = baggr("train", files["small"], "--target", "label", "--members", 60, "--run-dir", rd, "--no-ui",
              "--checkpoint-every", 20, env={"BAGGR_FAULT_KILL": "member:47"})
    assert r.returncode != 0
    me = psutil.Process()
    lines = [json.loads(x) for x in (rd / "journal.jsonl").read_text().splitlines()]
    for ev in lines:
        if ev["event"] == "start":
            ev.update(pid=me.pid, pid_started=me.create_time())
    (rd / "journal.jsonl").write_text("".join(json.dumps(ev) + "\n" for ev in lines))
    last = [ev for ev in lines if ev["event"] == "member"][-1]
    assert last["member"] == 47
    fig = json.loads(baggr("report", rd, "--json").stdout)
    ck = fig["checkpoint"]["member"]
    assert fig["status"] == "running" and fig["source"] == "checkpoint" and ck in (20, 40)
    assert fig["members"] == ck and len(fig["curve"]) == ck           # the checkpoint's own figures, as they were
    latest = fig["latest"]                                            # and the journal's latest line beside them
    assert latest["members"] == 47 and latest["oob_error"] == last["error"] and latest["interval"] == last["interval"]
    assert latest["confusion"] == last["confusion"]
    text = baggr("report", rd).stdout
    flat = " ".join(text.split())
    assert "47 of 60 so far" in flat and "Out-of-bag estimate at 47 members" in flat
    assert f"{100 * last['error']:.2f}%" in flat
    for k, name in enumerate(fig["classes"]):
        assert f"{name} error {100 * last['class_error'][k]:.2f}%" in flat
    assert f"From the checkpoint at {ck} members (written" in flat and "by ensemble size (checkpoint)" in flat


def test_watch_without_a_terminal_says_so_in_one_line_and_exits(run):
    # Piped, the dashboard wrote full-screen escape codes into the pipe and never ended (issue 15).
    rd, _ = run
    r = baggr("watch", rd, timeout=60)
    assert r.returncode == 2 and r.stdout == "" and "\x1b" not in r.stderr
    assert r.stderr.count("\n") == 1 and r.stderr.startswith("baggr: error: ")
    assert "needs a terminal" in r.stderr and f"baggr report {rd}" in r.stderr


# ---------------------------------------------------------------- predict

@pytest.mark.parametrize("ext", ["csv", "parquet"])
def test_predict_writes_a_prediction_and_a_share_per_class(run, files, tmp_path, ext):
    rd, _ = run
    out = tmp_path / f"scored.{ext}"
    r = baggr("predict", rd, files["new"], "--out", out)
    assert r.returncode == 0, r.stderr
    t = pq.read_table(out) if ext == "parquet" else pacsv.read_csv(out)
    assert t.column_names == ["prediction", "share_no", "share_yes"] and t.num_rows == 57
    shares = np.column_stack([t.column("share_no").to_numpy(), t.column("share_yes").to_numpy()])
    assert np.allclose(shares.sum(axis=1), 1.0, atol=1e-12)          # shares of all members' votes
    assert np.all(np.round(shares * 40) == shares * 40)               # hard votes: whole counts of 40 members
    ens = load(rd / MODEL)
    new = pacsv.read_csv(files["new"])
    assert t.column("prediction").to_pylist() == list(ens.predict(new))
    assert np.array_equal(shares, ens.vote_shares(new))


def test_predict_regression_writes_only_the_prediction(files, tmp_path):
    rng = np.random.default_rng(5)
    X = rng.random((200, 3))
    data = write_csv(tmp_path / "reg.csv", {"a": X[:, 0], "b": X[:, 1], "c": X[:, 2], "y": 10 * X[:, 0] + X[:, 1]})
    rd = tmp_path / "reg"
    r = baggr("train", data, "--target", "y", "--members", 10, "--run-dir", rd, "--no-ui")
    assert r.returncode == 0, r.stderr
    r = baggr("predict", rd, data, "--out", tmp_path / "p.csv")
    assert r.returncode == 0, r.stderr
    t = pacsv.read_csv(tmp_path / "p.csv")
    assert t.column_names == ["prediction"] and t.num_rows == 200
    assert np.array_equal(t.column("prediction").to_numpy(), load(rd / MODEL).predict(pacsv.read_csv(data)))
    fig = json.loads(baggr("report", rd, "--json").stdout)
    assert fig["task"] == "regression" and fig["r2"] is not None and "class_error" not in fig


# ---------------------------------------------------------------- demo, early stop

def test_demo_describes_trains_and_reports(tmp_path):
    from demo import scenario
    rd = tmp_path / "demo"
    r = baggr("demo", "--rows", 400, "--members", 8, "--run-dir", rd)
    assert r.returncode == 0, r.stderr
    assert scenario.DESCRIPTION.split()[:4] == r.stdout.split()[:4]
    assert "Read with care" in r.stdout and "Per class" in r.stdout
    ens = load(rd / MODEL)
    assert ens.members == 8 and ens.classes == sorted(scenario.CLASSES)
    assert RunDir(rd).state()[1] == "finished"


def _stable_run(tmp_path, cols, members):
    data = write_csv(tmp_path / "d.csv", cols)
    rd = tmp_path / "run"
    r = baggr("train", data, "--target", "label", "--members", members, "--run-dir", rd, "--no-ui",
              "--stop-when-stable", "--threads", 2)
    assert r.returncode == 0, r.stderr
    lines = [json.loads(x) for x in (rd / "journal.jsonl").read_text().splitlines()]
    needed = [[e["member"], e["members_needed"] if e["members_needed"] is not None else -1]
              for e in lines if e["event"] == "member" and "curve" in e]
    return rd, load(rd / MODEL).members, needed, lines


def test_stop_when_stable_stops_at_members_needed_on_an_easy_problem(tmp_path):
    rng = np.random.default_rng(0)
    X = rng.normal(size=(400, 4))
    cols = {**{f"f{j}": X[:, j] for j in range(4)}, "label": np.where(X[:, 0] > 0, "b", "a")}
    rd, m, needed, lines = _stable_run(tmp_path, cols, 2000)
    assert 64 <= m < 2000
    # The rule (tests/naive.py) holds where it stopped and nowhere before; the journal's refit lines
    # carry the members_needed estimates it reads.
    assert naive.stable_rule(needed, m)
    assert not any(naive.stable_rule(needed, k) for k in range(1, m))
    end = [e for e in lines if e["event"] == "end"]
    assert end[-1]["status"] == "finished" and end[-1]["reason"].startswith("stable")


def test_stop_when_stable_goes_on_to_the_target_on_a_hard_problem(tmp_path):
    # Many rows and 40% of labels redrawn at random: 60 members are not what the estimate asks for.
    cols = noisy_halves(20_000, seed=7)
    rd, m, needed, lines = _stable_run(tmp_path, cols, 60)
    assert m == 60
    assert not any(naive.stable_rule(needed, k) for k in range(1, 61))


def test_estimate_only_run_reports_but_cannot_predict(files, tmp_path):
    rd = tmp_path / "est"
    r = baggr("train", files["small"], "--target", "label", "--members", 12, "--run-dir", rd, "--no-ui",
              "--estimate-only")
    assert r.returncode == 0, r.stderr
    fig = json.loads(baggr("report", rd, "--json").stdout)
    assert fig["members"] == 12 and len(fig["curve"]) == 12
    r = baggr("predict", rd, files["new"], "--out", tmp_path / "p.csv")
    assert r.returncode == 2 and "estimate-only" in r.stderr and r.stderr.count("\n") == 1


def test_internal_error_is_one_line_and_the_journal_says_failed(files, tmp_path, capsys, monkeypatch):
    from baggr.cli import main as cli
    from baggr.runs import journal
    from baggr.runs import Job

    def broken(self):
        raise RuntimeError("a bug")
    monkeypatch.setattr(Job, "_run", broken)
    rd = tmp_path / "run"
    code = cli.main(["train", str(files["small"]), "--target", "label", "--run-dir", str(rd), "--no-ui"])
    err = capsys.readouterr().err
    assert code == 1
    assert err == "baggr: internal error: RuntimeError: a bug (run with --debug for details)\n"
    st = journal.read_state(rd)
    assert st.status == "failed" and st.reason.startswith("internal error")


# ---------------------------------------------------------------- bad input

def _bad_files(d: Path, run_dir: Path):
    """(name, args, phrase) of every mistake; files made here."""
    small = d / "small.csv"
    rng = np.random.default_rng(9)
    empty = d / "empty.csv"
    empty.write_bytes(b"")
    folder = d / "folder.csv"
    folder.mkdir()
    one = write_csv(d / "one.csv", {"a": rng.normal(size=30), "label": ["x"] * 30})
    nan = write_csv(d / "nan.csv", {"a": rng.normal(size=30), "y": np.where(np.arange(30) == 7, np.nan, 1.5)})
    ident = write_csv(d / "ident.csv", {"id": [f"c{i:05d}" for i in range(400)], "a": rng.normal(size=400),
                                        "label": ["p", "q"] * 200})
    semi = d / "semi.csv"
    semi.write_text("a;b;label\n1;2;x\n3;4;y\n5;6;x\n")
    ragged = d / "ragged.csv"
    ragged.write_text("a,b,label\n1,2,x\n3,4,y,9\n5,6,x\n")
    text = write_csv(d / "text.csv", {"a": [f"{v:.3f}" for v in rng.normal(size=40)][:39] + ["abc"],
                                      "label": ["x", "y"] * 20})
    garbage = d / "garbage.parquet"
    garbage.write_bytes(b"this is not parquet at all" * 10)
    afile = d / "afile"
    afile.write_text("x")
    # A model file from a newer format: a real one with its header's format_version raised.
    ens = train({"a": rng.normal(size=60), "b": rng.normal(size=60)}, ["u", "v"] * 30, Config(members=3))
    ens.save(d / "current.npz")
    header, arrays = npzfile.read(d / "current.npz")
    npzfile.write_atomic(d / "newer.npz", arrays, dict(header, format_version=header["format_version"] + 1))
    train({"a": rng.normal(size=60)}, ["u", "v"] * 30, Config(members=3, keep_members=False)).save(d / "est.npz")
    blank = d / "blank"
    blank.mkdir()
    waiting = create(d / "waiting")     # a run directory whose job never wrote a figure
    init_config(waiting, data=fingerprint(small), target="label", config=Config(), settings=RunSettings())
    (d / "taken.csv").write_text("x\n")
    t = ("train",)
    L = ("--target", "label")
    out = [
        ("missing file", (*t, d / "nope.csv", *L), "file not found"),
        ("empty file", (*t, empty, *L), "is empty"),
        ("folder", (*t, folder, *L), "is a folder"),
        ("not parquet", (*t, garbage, *L), "not a readable Parquet"),
        ("unknown target", (*t, small, "--target", "nope"), "target column 'nope' not found"),
        ("one class", (*t, one, *L), "only one class"),
        ("NaN in target", (*t, nan, "--target", "y", "--missing-target", "refuse"), "missing values"),
        ("identifier", (*t, ident, *L), "looks like an identifier"),
        ("wrong delimiter", (*t, semi, *L), "delimiter"),
        ("ragged", (*t, ragged, *L), "ragged rows"),
        ("text in numbers", (*t, text, *L), "is numeric but row 40 holds 'abc'"),
        ("members 0", (*t, small, *L, "--members", "0"), "members must be a whole number >= 1"),
        ("members text", (*t, small, *L, "--members", "lots"), "invalid int value: 'lots'"),
        ("features too many", (*t, small, *L, "--features-per-split", "99"),
         "--features-per-split is 99 but the table has only 4 features"),
        ("run dir not writable", (*t, small, *L, "--run-dir", afile / "sub"), "cannot create the run directory"),
        ("run dir exists", (*t, small, *L, "--run-dir", run_dir), "already exists (use --force"),
        ("force on a non-run folder", (*t, small, *L, "--run-dir", d, "--force"), "is not a baggr run directory"),
        ("predict newer model", ("predict", d / "newer.npz", small, "--out", d / "o.csv"), "newer baggr"),
        ("report newer model", ("report", d / "newer.npz"), "newer baggr"),
        ("predict estimate-only", ("predict", d / "est.npz", small, "--out", d / "o.csv"), "estimate-only"),
        ("predict missing model", ("predict", d / "none.npz", small, "--out", d / "o.csv"), "model file not found"),
        ("predict over a file", ("predict", run_dir, small, "--out", d / "taken.csv"), "already exists"),
        ("predict bad extension", ("predict", run_dir, small, "--out", d / "o.xlsx"), "--out must end in"),
        ("predict lacking columns", ("predict", run_dir, one, "--out", d / "o.csv"), "lacks 4 of the model's columns"),
        ("report missing dir", ("report", d / "nowhere"), "no run directory at"),
        ("report no figures yet", ("report", d / "waiting"), "has no figures yet"),
        ("watch missing dir", ("watch", d / "nowhere"), "no run directory at"),
        ("resume a plain folder", ("resume", blank), "not a baggr run directory"),
        ("stop a finished run", ("stop", run_dir), "no job is running"),
        ("unknown command", ("trian",), "invalid choice: 'trian'"),
    ]
    return out


@pytest.fixture(scope="module")
def bad(run, tmp_path_factory):
    """Every bad-input case, run two at a time: {name: (args, phrase, CompletedProcess, run dir asked for)}."""
    d = tmp_path_factory.mktemp("bad")
    (d / "small.csv").write_bytes((run[0].parent / "small.csv").read_bytes())
    cases = _bad_files(d, run[0])
    runs = {}
    for name, args, phrase in cases:
        if args[0] == "train" and "--run-dir" not in args:
            args = (*args, "--run-dir", d / "runs" / name.replace(" ", "-"))
        runs[name] = args, phrase
    with ThreadPoolExecutor(max_workers=2) as pool:
        futures = {name: pool.submit(baggr, *args) for name, (args, _) in runs.items()}
        return {name: (*runs[name], futures[name].result()) for name in runs}


BAD_CASES = [
    "missing file", "empty file", "folder", "not parquet", "unknown target", "one class", "NaN in target",
    "identifier", "wrong delimiter", "ragged", "text in numbers", "members 0", "members text",
    "features too many", "run dir not writable", "run dir exists", "force on a non-run folder",
    "predict newer model", "report newer model", "predict estimate-only", "predict missing model",
    "predict over a file", "predict bad extension", "predict lacking columns", "report missing dir",
    "report no figures yet", "watch missing dir", "resume a plain folder", "stop a finished run", "unknown command",
]


@pytest.mark.parametrize("name", BAD_CASES)
def test_bad_input_gives_one_clear_line_and_exit_code_2(bad, name):
    args, phrase, r = bad[name]
    assert r.returncode == 2, (r.stdout, r.stderr)
    assert r.stderr.startswith("baggr: error: ") and r.stderr.count("\n") == 1, r.stderr
    assert "Traceback" not in r.stderr
    assert phrase in r.stderr, r.stderr
    if args[0] == "train" and name not in ("run dir exists", "force on a non-run folder", "run dir not writable"):
        rd = Path(args[list(args).index("--run-dir") + 1])
        assert not rd.exists(), "a run that could not start leaves no run directory behind"
        assert str(rd) not in r.stdout, "nor does it print the path of the directory it removed"


def test_bad_input_cases_are_all_tested(bad):
    assert sorted(bad) == sorted(BAD_CASES)


def test_existing_run_dir_is_intact_after_the_refusals(run):
    rd, _ = run
    assert load(rd / MODEL).members == 40 and (rd / "journal.jsonl").exists()


def test_debug_shows_the_traceback(files, tmp_path):
    r = baggr("train", tmp_path / "nope.csv", "--target", "label", "--debug")
    assert r.returncode == 2 and "Traceback" in r.stderr and r.stderr.rstrip().endswith("file not found: "
                                                                                          f"{tmp_path / 'nope.csv'}")
