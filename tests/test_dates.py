"""Dates and times as features (baggr/data/dates.py), each part checked against Python's own calendar
(the standard library's datetime: toordinal, timetuple().tm_yday, weekday)."""
import datetime as dt

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pytest

import baggr
from baggr.data import Schema, encode, fit_binning, fit_schema
from baggr.data.dates import expand, find_dates
from baggr.errors import DataError, ModelFileError

EPOCH = dt.date(1970, 1, 1).toordinal()


def _days(d: dt.date) -> float:
    return float(d.toordinal() - EPOCH)


def test_parts_of_dates_agree_with_the_standard_library():
    rng = np.random.default_rng(4)
    days = rng.integers(-20000, 40000, 300)   # 1915 .. 2079, leap years and all
    dates = [dt.date.fromordinal(EPOCH + int(d)) for d in days]
    t = pa.table({"d": pa.array(dates, pa.date32()),
                  "text": [d.isoformat() for d in dates],
                  "slash": [d.strftime("%Y/%m/%d") for d in dates]})
    found = find_dates(t)
    assert found == [{"column": c, "parts": ["days", "day_of_year", "weekday"]} for c in ("d", "text", "slash")]
    e = expand(t, found)
    for c in ("d", "text", "slash"):
        assert e.column(f"{c}.days").to_pylist() == [_days(d) for d in dates]
        assert e.column(f"{c}.day_of_year").to_pylist() == [float(d.timetuple().tm_yday) for d in dates]
        assert e.column(f"{c}.weekday").to_pylist() == [float(d.weekday()) for d in dates]   # Monday 0


def test_timestamps_add_the_hour_and_text_offsets_count_from_utc():
    stamps = ["2021-03-04T05:06:07", "2021-03-04 18:30", "2021-12-31T23:59:59.5", None, "2020-02-29T12:00:00Z",
              "2020-02-29T12:00:00+02:00"]
    t = pa.table({"when": stamps})
    found = find_dates(t)
    assert found == [{"column": "when", "parts": ["days", "day_of_year", "weekday", "hour"]}]
    e = expand(t, found)
    # the same instants by the standard library (an offset of +02:00 is two hours before UTC)
    want = [dt.datetime(2021, 3, 4, 5, 6, 7), dt.datetime(2021, 3, 4, 18, 30), dt.datetime(2021, 12, 31, 23, 59, 59, 500000),
            None, dt.datetime(2020, 2, 29, 12), dt.datetime(2020, 2, 29, 10)]
    for k, w in enumerate(want):
        got = [e.column(f"when.{p}")[k].as_py() for p in ("days", "day_of_year", "weekday", "hour")]
        if w is None:
            assert all(np.isnan(g) for g in got)
            continue
        secs = (w - dt.datetime(1970, 1, 1)).total_seconds()
        assert got[0] == pytest.approx(secs / 86400, abs=1e-9)
        assert got[1:3] == [w.timetuple().tm_yday, w.weekday()]
        assert got[3] == pytest.approx(w.hour + w.minute / 60 + w.second / 3600, abs=1e-9)


def test_arrow_timestamps_with_a_zone_are_read_in_that_zone():
    # 2021-06-30 23:30 UTC is 2021-07-01 01:30 in Paris (summer time, +02:00): day 182, a Thursday
    utc = dt.datetime(2021, 6, 30, 23, 30, tzinfo=dt.timezone.utc)
    t = pa.table({"at": pa.array([utc], pa.timestamp("s", tz="Europe/Paris")), "x": [1.0]})
    e = expand(t, find_dates(t))
    local = dt.datetime(2021, 7, 1, 1, 30)
    assert e.column("at.day_of_year")[0].as_py() == local.timetuple().tm_yday == 182
    assert e.column("at.weekday")[0].as_py() == local.weekday() == 3
    assert e.column("at.hour")[0].as_py() == 1.5
    assert e.column("at.days")[0].as_py() == pytest.approx((local - dt.datetime(1970, 1, 1)).total_seconds() / 86400)


def test_a_date_column_that_is_mostly_dates_names_the_bad_row_and_the_option():
    values = [f"2020-01-{d:02d}" for d in range(1, 31)]
    values[12] = "soon"
    with pytest.raises(DataError, match=r"column 'day' holds dates but row 13 holds 'soon'.*--drop day"):
        fit_schema(pa.table({"day": values, "x": np.arange(30.0)}), np.arange(30) % 2)
    # text that only starts like a date is an ordinary categorical column
    s, _ = fit_schema(pa.table({"c": ["2020-01-01 meeting", "lunch"] * 5}), np.arange(10) % 2)
    assert s.kinds == ["categorical"] and s.dates == []
    with pytest.raises(DataError, match="does not exist"):
        fit_schema(pa.table({"d": ["2020-13-01", "2020-01-01"] * 3}), np.arange(6) % 2)


def test_the_schema_records_dates_and_scoring_derives_them_the_same_way(tmp_path):
    rng = np.random.default_rng(1)
    n = 400
    days = rng.integers(18000, 19000, n)
    dates = [dt.date.fromordinal(EPOCH + int(d)) for d in days]
    weekend = np.array([d.weekday() >= 5 for d in dates])
    y = np.where(weekend ^ (rng.random(n) < 0.05), "closed", "open")
    t = pa.table({"day": pa.array(dates, pa.date32()), "noise": rng.normal(size=n)})
    ens = baggr.train(t, y, baggr.Config(members=30, seed=2))
    assert ens.schema.dates == [{"column": "day", "parts": ["days", "day_of_year", "weekday"]}]
    assert ens.schema.names == ["day.days", "day.day_of_year", "day.weekday", "noise"]
    # weekends are one split on the weekday away: far better than the 29% of the majority guess
    assert ens.oob.error < 0.10, ens.oob.error
    ens.save(tmp_path / "m.npz")
    back = baggr.load(tmp_path / "m.npz")
    assert back.schema.dates == ens.schema.dates
    # the same rows as ISO text in a CSV (as a new table would come) score exactly as the Arrow dates
    pacsv.write_csv(pa.table({"noise": t.column("noise"), "day": [d.isoformat() for d in dates]}), tmp_path / "n.csv")
    assert np.array_equal(back.vote_shares(tmp_path / "n.csv"), ens.vote_shares(t))
    # a table without the date column is told by the column's name, not by its parts
    with pytest.raises(DataError, match=r"lacks 1 of the model's columns: 'day'$"):
        back.predict(pa.table({"noise": [0.0]}))


def test_a_schema_with_dates_round_trips_and_bad_dates_are_refused():
    t = pa.table({"d": ["2020-01-01", "2020-06-01"] * 5, "x": np.arange(10.0)})
    s, _ = fit_schema(t, np.arange(10) % 2)
    assert Schema.from_json(s.to_json()) == s
    b = fit_binning(t, s)
    assert encode(t, s, b).shape == (4, 10)
    bad = s.to_json()
    bad["dates"] = [{"column": "d", "parts": ["days", "fortnight"]}]
    with pytest.raises(ModelFileError, match="date parts"):
        Schema.from_json(bad)
    old = s.to_json()
    del old["dates"]          # a schema written before dates: still read (no date columns)
    assert Schema.from_json(old).dates == []
