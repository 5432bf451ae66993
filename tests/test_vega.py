"""Two real open tables, trained on as a new user would, through the real `baggr` executable, without
editing them: seattle-weather.csv (daily weather in Seattle, 2012-2015, a date column and a 5-class
`weather` target) and cars.json (406 cars with a name, a model year as a date and numeric targets such
as Horsepower, 6 of them missing), as shipped by the PyPI package vega_datasets 0.9.0."""
import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import vega_datasets

import baggr

DATA = Path(vega_datasets.__file__).parent / "_data"
BAGGR = [sys.executable, "-m", "baggr.cli"]


def baggr_cmd(*args):
    return subprocess.run([*BAGGR, *map(str, args)], capture_output=True, text=True, timeout=300,
                          env=dict(os.environ))


def test_seattle_weather_trains_as_shipped_with_its_dates(tmp_path):
    src = DATA / "seattle-weather.csv"          # vega_datasets 0.9.0: date,precipitation,temp_max,temp_min,wind,weather
    rd = tmp_path / "weather"
    r = baggr_cmd("train", src, "--target", "weather", "--members", 60, "--run-dir", rd)
    assert r.returncode == 0, r.stderr
    ens = baggr.load(rd)
    # the file's own counts of each weather class (read by pyarrow, not by baggr)
    t = pacsv.read_csv(src, convert_options=pacsv.ConvertOptions(column_types={"date": pa.string()}))
    counts = {v["values"]: v["counts"] for v in pc.value_counts(t.column("weather")).to_pylist()}
    assert t.num_rows == 1461 and ens.classes == sorted(counts) == ["drizzle", "fog", "rain", "snow", "sun"]
    assert list(ens.oob.class_rows) == [counts[c] for c in ens.classes]
    # its dates are written 2012/01/01: read as dates all the same, the first day a Sunday (weekday 6)
    assert ens.schema.dates == [{"column": "date", "parts": ["days", "day_of_year", "weekday"]}]
    assert t.column("date")[0].as_py() == "2012/01/01"
    # far better than always saying the most common class (sun: 714 of 1461 days)
    majority = 1 - max(counts.values()) / t.num_rows
    assert round(majority, 4) == 0.5113 and ens.oob.error < 0.6 * majority, ens.oob.error
    r = baggr_cmd("predict", rd, src, "--out", tmp_path / "p.csv", "--keep", "date")
    assert r.returncode == 0 and r.stderr == "", r.stderr
    assert pacsv.read_csv(tmp_path / "p.csv", convert_options=pacsv.ConvertOptions(
        column_types={"date": pa.string()})).column("date").to_pylist() == t.column("date").to_pylist()


def test_cars_train_with_drop_and_the_task_the_messages_name(tmp_path):
    rows = json.loads((DATA / "cars.json").read_text())    # vega_datasets 0.9.0: 406 cars
    data = tmp_path / "cars.csv"
    pacsv.write_csv(pa.Table.from_pylist(rows), data)     # the same table as CSV; no column changed
    common = ("--target", "Horsepower", "--members", 40)
    r = baggr_cmd("train", data, *common, "--run-dir", tmp_path / "a")
    assert r.returncode == 2 and "column 'Name' looks like an identifier" in r.stderr and "--drop Name" in r.stderr
    r = baggr_cmd("train", data, *common, "--drop", "Name", "--run-dir", tmp_path / "b")
    assert r.returncode == 2 and "target 'Horsepower' holds 93 distinct whole numbers in 400 rows" in r.stderr
    assert "--task regression" in r.stderr
    rd = tmp_path / "c"
    r = baggr_cmd("train", data, *common, "--drop", "Name", "--task", "regression", "--run-dir", rd)
    assert r.returncode == 0, r.stderr
    hp = [c["Horsepower"] for c in rows]
    assert sum(v is None for v in hp) == 6
    assert "warning: left out 6 of 406 rows whose target 'Horsepower' is missing" in r.stdout.splitlines()
    ens = baggr.load(rd)
    assert ens.task == "regression" and ens.oob.left_out.shape == (400,)
    assert ens.schema.dates == [{"column": "Year", "parts": ["days", "day_of_year", "weekday"]}]
    # engine size, weight and cylinders say most of a car's horsepower: the OOB error is a small part of
    # the target's variance (numpy's), i.e. R2 well above 0.8
    var = float(np.var([v for v in hp if v is not None]))
    assert ens.oob.error < 0.2 * var, (ens.oob.error, var)
