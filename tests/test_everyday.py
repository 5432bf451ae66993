"""Everyday use through the real `baggr` executable: choosing columns, dates, the target's kind, missing
targets, unseen categories, columns kept beside predictions, the command's own words, the first run's
compile note and the small things (--version, --delimiter, baggr.load of a run directory, ...)."""
import io
import json
import os
import re
import shutil
import subprocess
import sys
import textwrap
import tomllib
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pytest

import baggr
from baggr.data.schema import MANY_SHARE, MANY_VALUES, fit_target
from baggr.errors import DataError, RunDirError

BAGGR = [sys.executable, "-m", "baggr.cli"]
ROOT = Path(__file__).resolve().parent.parent


def baggr_cmd(*args, timeout=180, env=None):
    return subprocess.run([*BAGGR, *map(str, args)], capture_output=True, text=True, timeout=timeout,
                          env=dict(os.environ, **(env or {})))


def ok(r):
    assert r.returncode == 0, (r.stdout, r.stderr)
    return r


def one_error(r, *phrases):
    """One line on stderr, exit code 2, each phrase in it."""
    assert r.returncode == 2 and r.stderr.startswith("baggr: error: ") and r.stderr.count("\n") == 1, r.stderr
    for p in phrases:
        assert p in r.stderr, (p, r.stderr)


def visits(n, seed, missing_target=0):
    """A table with an identifier, a date, numbers, a category, a class target and a count."""
    rng = np.random.default_rng(seed)
    day = rng.integers(18000, 19000, n)
    weekday = (day + 3) % 7                       # 1970-01-01 was a Thursday (weekday 3)
    f0, f1 = rng.normal(size=n).round(3), rng.normal(size=n).round(3)
    site = rng.choice(["north", "south", "east"], n)
    label = np.where((weekday >= 5) ^ (f0 + 0.3 * rng.normal(size=n) > 1.2), "busy", "calm").astype(object)
    label[rng.choice(n, missing_target, replace=False)] = None
    return {"id": [f"v{i:05d}" for i in range(n)],
            "day": [str(np.datetime64(int(d), "D")) for d in day],
            "f0": f0, "f1": f1, "site": site, "label": label.tolist(),
            "count": rng.integers(0, 60, n)}


def write(path, cols):
    pacsv.write_csv(pa.table(cols), path)
    return path


@pytest.fixture(scope="module")
def d(tmp_path_factory):
    return tmp_path_factory.mktemp("everyday")


@pytest.fixture(scope="module")
def trained(d):
    """A finished run on visits.csv with --drop id and 3 missing targets (also warms the kernels)."""
    data = write(d / "visits.csv", visits(300, 1, missing_target=3))
    rd = d / "run"
    r = ok(baggr_cmd("train", data, "--target", "label", "--drop", "id", "--drop", "count", "--members", 30,
                     "--run-dir", rd, "--seed", 2))
    return data, rd, r


# ---------------------------------------------------------------- 1. choosing columns

def test_drop_and_only_choose_the_columns(d, trained):
    data, rd, _ = trained
    # without --drop: the identifier's message names the option that helps
    one_error(baggr_cmd("train", data, "--target", "label", "--run-dir", d / "no"),
              "column 'id' looks like an identifier", "--drop id")
    ens = baggr.load(rd)
    assert "id" not in ens.schema.names and "count" not in ens.schema.names
    assert json.loads((rd / "config.json").read_text())["table"]["drop"] == ["id", "count"]
    ok(baggr_cmd("train", data, "--target", "label", "--only", "f0,site", "--members", 5, "--run-dir", d / "only"))
    assert baggr.load(d / "only").schema.names == ["f0", "site"]
    one_error(baggr_cmd("train", data, "--target", "label", "--drop", "id,nope", "--run-dir", d / "nope"),
              "has no column 'nope'")
    assert not (d / "nope").exists()
    # Python: the same choice as keywords of train and read_table
    X, y = baggr.read_table(data, target="label", only=["f0", "f1"])
    assert X.column_names == ["f0", "f1"]
    with pytest.warns(UserWarning, match="left out 3 of 300 rows"):
        ens = baggr.train(*baggr.read_table(data, target="label"), baggr.Config(members=5), drop=["id", "count"])
    assert ens.schema.names == baggr.load(rd).schema.names


# ---------------------------------------------------------------- 2. dates

def test_a_date_column_in_a_csv_is_a_feature_and_predict_reads_it_the_same_way(d, trained):
    data, rd, _ = trained
    cfg = json.loads((rd / "config.json").read_text())
    assert cfg["data"]["dates"] == [{"column": "day", "parts": ["days", "day_of_year", "weekday"]}]
    ens = baggr.load(rd)
    assert ens.schema.dates == cfg["data"]["dates"]
    # busy on weekends: the weekday part carries it, so the error is far below the majority's (Monday 0:
    # Saturday and Sunday are weekday >= 5, datetime.date.weekday)
    assert ens.oob.error < 0.15, ens.oob.error
    new = d / "new.csv"
    write(new, {k: v for k, v in visits(40, 7).items() if k != "label"})
    ok(baggr_cmd("predict", rd, new, "--out", d / "scored.csv"))
    assert pacsv.read_csv(d / "scored.csv").column("prediction").to_pylist() == list(ens.predict(new))


# ---------------------------------------------------------------- 3. the target's kind

def test_a_whole_number_target_with_many_values_needs_the_task(d, trained):
    data, _, _ = trained
    one_error(baggr_cmd("train", data, "--target", "count", "--drop", "id,label", "--run-dir", d / "count"),
              "target 'count' holds 60 distinct whole numbers in 300 rows", "--task regression", "--task classes")
    ok(baggr_cmd("train", data, "--target", "count", "--drop", "id,label", "--task", "regression", "--members", 5,
                 "--run-dir", d / "count"))
    assert baggr.load(d / "count").task == "regression"
    # the threshold: more than MANY_VALUES values and more than MANY_SHARE of the rows (README)
    assert (MANY_VALUES, MANY_SHARE) == (20, 0.05)
    assert fit_target(np.arange(100) % 20, 100, None)[0] == "classes"            # 20 values
    with pytest.raises(DataError, match="21 distinct whole numbers"):
        fit_target(np.arange(100) % 21, 100, None)                                # 21 > 20 and 21 > 5
    assert fit_target(np.arange(1000) % 21, 1000, None)[0] == "classes"         # 21 < 5% of 1000
    assert fit_target(np.arange(100) % 21, 100, "classes")[0] == "classes"      # asked for: no question
    with pytest.raises(DataError, match="give --task regression"):              # past 255 classes
        fit_target(np.arange(600) % 300, 600, "classes")


# ---------------------------------------------------------------- 4. missing target values

def test_rows_without_a_target_are_left_out_with_one_warning(d, trained):
    data, rd, r = trained
    line = "warning: left out 3 of 300 rows whose target 'label' is missing"
    assert r.stdout.splitlines().count(line) == 1, r.stdout
    events = [json.loads(x) for x in (rd / "journal.jsonl").read_text().splitlines()]
    assert [e["message"] for e in events if e["event"] == "warning"] == [line[len("warning: "):]]
    assert [e["missing_target"] for e in events if e["event"] == "start"] == [3]
    assert json.loads((rd / "config.json").read_text())["data"]["missing_target"] == 3
    assert baggr.load(rd).oob.left_out.shape == (297,)
    text = ok(baggr_cmd("report", rd)).stdout
    assert "label (2 classes); 3 rows without it left out" in text
    assert json.loads(ok(baggr_cmd("report", rd, "--json")).stdout)["missing_target"] == 3
    assert json.loads(ok(baggr_cmd("report", rd / "model.npz", "--json")).stdout)["missing_target"] == 3
    one_error(baggr_cmd("train", data, "--target", "label", "--drop", "id", "--missing-target", "refuse",
                        "--run-dir", d / "refuse"), "target 'label' has 3 missing values (of 300)")


# ---------------------------------------------------------------- 5, 6. unseen categories, --keep

def test_unseen_categories_score_as_missing_with_one_warning_and_keep_copies_columns(d, trained):
    _, rd, _ = trained
    cols = {k: v for k, v in visits(50, 9).items() if k != "label"}
    cols["site"] = list(cols["site"])
    cols["site"][3] = cols["site"][17] = "west"            # never seen in training
    new = write(d / "unseen.csv", cols)
    r = ok(baggr_cmd("predict", rd, new, "--out", d / "u.csv", "--keep", "id,day"))
    assert r.stderr == "warning: 2 values were categories the model never saw (site 2); scored as missing\n"
    out = pacsv.read_csv(d / "u.csv")
    assert out.column_names == ["id", "day", "prediction", "share_busy", "share_calm"]
    assert out.column("id").to_pylist() == cols["id"]
    # the same rows with those two cells missing score exactly alike (the missing bin)
    as_missing = dict(cols, site=[None if s == "west" else s for s in cols["site"]])
    ens = baggr.load(rd)
    shares = np.column_stack([out.column("share_busy").to_numpy(), out.column("share_calm").to_numpy()])
    assert np.array_equal(shares, ens.vote_shares(pa.table(as_missing)))
    again = write(d / "scored-before.csv", dict(cols, prediction=["calm"] * 50))   # a table scored before
    one_error(baggr_cmd("predict", rd, again, "--out", d / "k.csv", "--keep", "prediction"),
              "--keep prediction: the output has its own column")
    one_error(baggr_cmd("predict", rd, new, "--out", d / "k.csv", "--keep", "nope"), "has no column 'nope'")


def test_predict_streams_dates_kept_columns_and_unseen_counts_batch_by_batch(d, trained, tmp_path):
    """Scoring in batches of a few rows gives what scoring the whole table does (its own Python API)."""
    from baggr.cli.commands import _predict_stream
    from baggr.data.batches import Batches
    _, rd, _ = trained
    ens = baggr.load(rd)
    cols = {k: v for k, v in visits(90, 11).items() if k != "label"}
    cols["site"] = [s if i % 7 else "west" for i, s in enumerate(cols["site"])]      # 13 unseen values
    for path in (write(tmp_path / "s.csv", cols), tmp_path / "s.parquet"):
        if path.suffix == ".parquet":
            import pyarrow.parquet as pq
            t = pa.table(dict(cols, day=pa.array(np.array(cols["day"], dtype="datetime64[D]"))))
            pq.write_table(t, path, row_group_size=20)
        batches = Batches(path, ens.schema.names, ens.schema.kinds, rows=8, block_bytes=512, dates=ens.schema.dates,
                          keep=["id", "day"])
        unseen = {}
        assert _predict_stream(ens, batches, tmp_path / "o.csv", "csv", ["id", "day"], unseen) == 90
        out = pacsv.read_csv(tmp_path / "o.csv", convert_options=pacsv.ConvertOptions(
            column_types={"day": pa.string()}))
        assert out.column("id").to_pylist() == cols["id"] and out.column("day").to_pylist() == cols["day"]
        whole = pa.table(cols)
        assert out.column("prediction").to_pylist() == list(ens.predict(whole))
        assert unseen == {"site": (13, False)}


# ---------------------------------------------------------------- 12. the command's own words

def test_the_report_and_errors_use_the_commands_words(d, trained):
    _, rd, _ = trained
    text = ok(baggr_cmd("report", rd)).stdout
    settings = text[text.index("Settings"):text.index("Read with care")]
    for leak in ("keep_members", "features_per_split", "None", "True", "False", "auto", "null"):
        assert leak not in settings, leak
    # 5 features (day's three parts, f0, f1; site) = 6: int(sqrt(6)) = 2 (the square root rule)
    flat = " ".join(settings.split())
    assert "features per split 2 of 6 features (the square root rule, the default for classes)" in flat
    assert "criterion gini (the default)" in flat and "task classes (from the target)" in flat
    cfg = json.loads(ok(baggr_cmd("report", rd, "--json")).stdout)["config"]
    assert (cfg["features_per_split"], cfg["features_per_split_rule"], cfg["criterion"], cfg["task"]) == \
        (2, "sqrt", "gini", "classes")
    start = [json.loads(x) for x in (rd / "journal.jsonl").read_text().splitlines()
             if '"event":"start"' in x][0]
    assert start["resolved"]["features_per_split"] == 2 and start["resolved"]["criterion"] == "gini"
    r = baggr_cmd("train", d / "visits.csv", "--target", "label", "--threads", "0", "--run-dir", d / "t0")
    one_error(r, "--threads must be a whole number >= 1")
    assert "None" not in r.stderr
    r = baggr_cmd("train", d / "visits.csv", "--target", "label", "--min-leaf", "0", "--run-dir", d / "t0")
    one_error(r, "--min-leaf must be a whole number >= 1")
    est = d / "est"
    ok(baggr_cmd("train", d / "visits.csv", "--target", "label", "--drop", "id", "--estimate-only",
                 "--members", 3, "--run-dir", est))
    r = baggr_cmd("predict", est, d / "visits.csv", "--out", d / "e.csv")
    one_error(r, "was trained with --estimate-only")
    assert "keep_members" not in r.stderr


def test_the_dashboards_settings_use_the_commands_words_and_the_resolved_values(trained):
    """The settings panel reads the start line's config and resolved values (no Python names or values)."""
    from baggr.runs.journal import read_state
    from tui.view import make_view
    from tui.widgets.settings import settings_rows
    _, rd, _ = trained
    st = read_state(rd)
    view = make_view(st, run_name="run", status="finished", now=0.0, width=40, log_x=False, highlight=None,
                     stop_requested=False, malformed=0, curves=False)
    rows = dict(settings_rows(view))
    assert rows["features/split"] == "2 of 6 (sqrt)" and rows["trees kept"] == "yes"
    assert rows["depth limit"] == "none" and rows["threads"] == f"all cores ({st.threads})"
    flat = " ".join(f"{k} {v}" for k, v in rows.items())
    for leak in ("keep_members", "features_per_split", "None", "True", "auto"):
        assert leak not in flat, leak


# ---------------------------------------------------------------- 13. the first run

def test_a_cold_cache_is_told_before_compiling_and_kept_out_of_the_figures(d, trained, monkeypatch):
    """In this process, with a clock that jumps 1000 s while the kernels warm up (a fake compile)."""
    from baggr import engine
    from baggr.cli import progress as prog
    from baggr.runs import Job, RunDir, RunSettings, create, fingerprint, init_config

    class Clock:
        now = 0.0

        def perf_counter(self):
            self.now += 0.001
            return self.now

    clock = Clock()
    monkeypatch.setattr(engine, "time", clock)
    monkeypatch.setattr(engine, "compile_seconds", lambda task: 42.0)
    monkeypatch.setattr(engine, "_WARM", set())
    real = engine.Training.warm_up

    def slow_warm_up(self):
        seconds = real(self)
        clock.now += 1000.0 if seconds else 0.0
        return seconds
    monkeypatch.setattr(engine.Training, "warm_up", slow_warm_up)
    data, _, _ = trained
    rd = create(d / "cold")
    init_config(rd, data=fingerprint(data), target="label", config=baggr.Config(members=20, threads=1),
                settings=RunSettings(), table={"drop": ["id", "count"]})
    out = io.StringIO()
    assert Job(RunDir(rd.path), prog.PlainProgress(out)).run().code == 0
    lines = out.getvalue().splitlines()
    note = "preparing compiled code, once: about 40 s"     # 42 s, rounded to 5 s
    assert lines[0] == note and lines[2].startswith("training:"), lines
    events = [json.loads(x) for x in (rd / "journal.jsonl").read_text().splitlines()]
    assert [e["event"] for e in events][:3] == ["compiling", "warning", "start"]
    end = events[-1]
    assert end["event"] == "end" and end["elapsed"] < 1000     # the jump stayed out of training time
    assert all(e["rate"] > 1 for e in events if e["event"] == "member" and e["member"] > 1)
    # data that cannot be used is told first, with no promise of a compile
    bad = create(d / "cold-bad")
    init_config(bad, data=fingerprint(data), target="label", config=baggr.Config(members=5), settings=RunSettings())
    out = io.StringIO()
    with pytest.raises(DataError, match="identifier"):
        Job(RunDir(bad.path), prog.PlainProgress(out)).run()
    assert out.getvalue() == ""


def test_the_warm_up_compiles_all_that_training_runs(trained, monkeypatch):
    """After the warm-up no kernel gains a compiled version: compiling is over before training's clock
    starts (numba keeps one version per argument types, read-only flags included)."""
    from baggr import engine, jit
    monkeypatch.setattr(engine, "_WARM", set())
    data, _, _ = trained
    for target, drop, task in (("label", ["id", "count"], None), ("count", ["id", "label"], "regression")):
        X, y = baggr.read_table(data, target=target, drop=drop)
        tr = engine.Training(X, y, baggr.Config(members=6, threads=2, task=task), target=target)
        tr.warm_up()
        before = [len(k.signatures) for k in jit.KERNELS]
        tr.run()
        assert [len(k.signatures) for k in jit.KERNELS] == before, target


def test_the_cache_look_tells_a_new_kernel_from_a_compiled_one(tmp_path):
    """baggr.jit.cached reads numba's cache index: false before the first call, true after, and in a new
    process (the compiled code is on disk)."""
    from baggr import jit
    mod = tmp_path / "fresh_kernel_mod.py"
    mod.write_text(textwrap.dedent(f"""
        from baggr.jit import kernel

        @kernel
        def add_{os.getpid()}(a, b):
            return a + b
        k = add_{os.getpid()}
        """))
    sys.path.insert(0, str(tmp_path))
    try:
        import fresh_kernel_mod
        assert not jit.cached(fresh_kernel_mod.k)
        assert fresh_kernel_mod.k(2, 3) == 5
        assert jit.cached(fresh_kernel_mod.k)
    finally:
        sys.path.remove(str(tmp_path))
        sys.modules.pop("fresh_kernel_mod", None)
    code = "import sys; sys.path.insert(0, sys.argv[1]); import fresh_kernel_mod as m; from baggr import jit; " \
           "print(jit.cached(m.k))"
    r = subprocess.run([sys.executable, "-c", code, str(tmp_path)], capture_output=True, text=True, timeout=120)
    assert r.stdout.strip() == "True", r.stderr


# ---------------------------------------------------------------- 14. small things

def test_version_and_load_of_a_run_directory(d, trained):
    _, rd, _ = trained
    r = ok(baggr_cmd("--version"))
    version = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["version"]
    assert r.stdout == f"baggr {version}\n" and baggr.__version__ == version
    a, b = baggr.load(rd), baggr.load(rd / "model.npz")
    assert np.array_equal(a.oob.curve, b.oob.curve) and a.schema == b.schema
    waiting = d / "waiting"
    from baggr.runs import RunSettings, create, fingerprint, init_config
    init_config(create(waiting), data=fingerprint(d / "visits.csv"), target="label", config=baggr.Config(),
                settings=RunSettings())
    with pytest.raises(RunDirError, match="has no model yet \\(the job has not started\\)"):
        baggr.load(waiting)


def test_report_lines_carry_no_trailing_spaces_and_a_crashed_job_reads_so(tmp_path, trained):
    _, rd, _ = trained
    text = ok(baggr_cmd("report", rd)).stdout
    assert text.strip() and not [ln for ln in text.splitlines() if ln != ln.rstrip()]
    crashed = tmp_path / "crashed"
    shutil.copytree(ROOT / "tests" / "data" / "v1" / "run_v1", crashed)   # written by a job killed at member 14
    one_error(baggr_cmd("stop", crashed), f"no job is running in {crashed}: the job crashed at 14 members")


def test_delimiter_gives_the_way_out_of_a_semicolon_csv(tmp_path):
    rng = np.random.default_rng(3)
    rows = "\n".join(f"{a:.3f};{b:.3f};{'x' if a > 0 else 'y'}" for a, b in rng.normal(size=(60, 2)))
    semi = tmp_path / "semi.csv"
    semi.write_text("a;b;label\n" + rows + "\n")
    one_error(baggr_cmd("train", semi, "--target", "label", "--run-dir", tmp_path / "r"),
              "read as a single column: is the delimiter ';'? (--delimiter ';')")
    ok(baggr_cmd("train", semi, "--target", "label", "--delimiter", ";", "--members", 5, "--run-dir", tmp_path / "r"))
    assert baggr.load(tmp_path / "r").schema.names == ["a", "b"]
    tab = tmp_path / "tab.csv"
    tab.write_text(semi.read_text().replace(";", "\t"))
    # kept in config.json: a resumed job reads the table the same way
    assert json.loads((tmp_path / "r" / "config.json").read_text())["table"]["delimiter"] == ";"
    ok(baggr_cmd("train", tab, "--target", "label", "--delimiter", "tab", "--members", 5, "--run-dir", tmp_path / "t"))
    one_error(baggr_cmd("train", tab, "--target", "label", "--delimiter", "ab"), "expected one character")


def test_the_demo_text_wraps_to_the_terminal(tmp_path):
    from demo import scenario
    r = ok(baggr_cmd("demo", "--rows", 300, "--members", 5, "--run-dir", tmp_path / "demo", env={"COLUMNS": "60"}))
    lines = r.stdout.split("\n\n")[0].splitlines()
    assert " ".join(lines).split() == scenario.DESCRIPTION.split()
    assert max(map(len, lines)) <= 59 and len(lines) > 1
    assert not re.search(r" \n", r.stdout)
