"""Dates and times as features: a date or timestamp column becomes a few numeric columns.

A column is a date column when Arrow types it as a date or timestamp, or when it is text whose
every non-empty value is a year-first date (2012-01-31, 2012/01/31), optionally with a time of day
(T or a space, then 13:45, 13:45:10 or 13:45:10.5) and a zone (Z or +02:00). It becomes:

  <col>.days         days since 1970-01-01 (fractional for timestamps): trends and regime changes.
                     A split can only say "before" or "after" a day: dates later than the training
                     rows all land in the top bin, so a tree carries the latest period forward and
                     never extrapolates a trend.
  <col>.day_of_year  1..366: seasons. The year's ends are far apart as numbers, so winter takes a
                     tree two splits; a month boundary is one split (month itself adds nothing).
  <col>.weekday      0 (Monday) .. 6 (Sunday): weekend rows are one split away (weekday >= 5).
  <col>.hour         hour of the day with its fraction, 0..24: only for timestamps whose times of
                     day vary (a column of midnights is a date column).

Times with a zone are taken in that zone for Arrow columns, in UTC for text with an offset.
The schema records each date column and its parts; scoring new rows derives the same parts.
"""
from __future__ import annotations

import re

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from baggr.errors import DataError

PARTS = ("days", "day_of_year", "weekday", "hour")
DAY_SECONDS = 86400.0

# A year-first date as text, optionally with a time of day and a zone.
DATE_TEXT = (r"^\s*\d{4}(-\d{2}-\d{2}|/\d{2}/\d{2})"
             r"([T ]\d{2}:\d{2}(:\d{2}(\.\d+)?)?)?\s*(Z|[+-]\d{2}:?\d{2})?\s*$")
_ZONE = r"\s*(Z|[+-]\d{2}:?\d{2})\s*$"


def is_temporal(t: pa.DataType) -> bool:
    """Whether an Arrow type is a date or a timestamp."""
    if pa.types.is_dictionary(t):
        t = t.value_type
    return pa.types.is_date(t) or pa.types.is_timestamp(t)


def feature_names(column: str, parts) -> list[str]:
    return [f"{column}.{p}" for p in parts]


def text_dates(name: str, col) -> bool:
    """Whether a text column holds dates: every non-empty value a year-first date.

    The first non-empty value decides quickly; a column that is mostly dates but holds something
    else raises a DataError naming the row.
    """
    col = _plain_text(col)
    filled = pc.utf8_trim_whitespace(pc.fill_null(col, ""))
    nonempty = pc.greater(pc.utf8_length(filled), 0)
    present = filled.filter(nonempty)
    if len(present) == 0 or not re.match(DATE_TEXT, present[0].as_py()):
        return False
    is_date = pc.match_substring_regex(filled, DATE_TEXT)
    n_nonempty = pc.sum(nonempty).as_py() or 0
    n_dates = pc.sum(pc.and_(nonempty, is_date)).as_py() or 0
    if n_dates == n_nonempty:
        return True
    if n_dates < 0.9 * n_nonempty:
        return False   # a text column that starts with a date: categorical
    from baggr.data.table import shell_word
    bad = np.flatnonzero(pc.and_(nonempty, pc.invert(is_date)).to_numpy(zero_copy_only=False))
    row = int(bad[0])
    raise DataError(f"column {name!r} holds dates but row {row + 1} holds {col[row].as_py()!r} "
                    f"({len(bad)} such values; mark them missing, fix them, or leave the column out "
                    f"with --drop {shell_word(name)})")


def find_dates(frame) -> list[dict]:
    """The date columns of an Arrow table: [{"column": name, "parts": [...]}], in column order."""
    from baggr.data.table import column_kind
    out = []
    for i, name in enumerate(frame.column_names):
        col = frame.column(i)
        if is_temporal(col.type) or (column_kind(col) == "text" and text_dates(name, col)):
            ts = timestamps(name, col)
            parts = list(PARTS[:3])
            if has_times(ts):
                parts.append("hour")
            out.append({"column": name, "parts": parts})
    return out


def timestamps(name: str, col) -> pa.ChunkedArray:
    """A date, timestamp or date-text column as Arrow timestamps (a zone kept where Arrow has one)."""
    col = col if isinstance(col, pa.ChunkedArray) else pa.chunked_array([col])
    t = col.type
    if pa.types.is_dictionary(t):
        col = col.cast(t.value_type)
        t = col.type
    if pa.types.is_timestamp(t):
        return col
    if pa.types.is_date(t):
        return col.cast(pa.timestamp("s"))
    if pa.types.is_null(t):
        return col.cast(pa.timestamp("s"))
    from baggr.data.table import column_kind
    if column_kind(col) != "text":
        raise DataError(f"column {name!r} should hold dates but holds {t}")
    text = pc.utf8_trim_whitespace(_plain_text(col))
    text = pc.if_else(pc.equal(text, ""), pa.scalar(None, pa.string()), text)
    ok = pc.fill_null(pc.match_substring_regex(text, DATE_TEXT), True)
    if not pc.all(ok).as_py():
        row = int(np.flatnonzero(~ok.to_numpy(zero_copy_only=False))[0])
        raise DataError(f"column {name!r} should hold dates but row {row + 1} holds {col[row].as_py()!r}")
    offsets = _offset_seconds(pc.extract_regex(text, r"(?P<z>Z|[+-]\d{2}:?\d{2})\s*$"))
    base = pc.replace_substring_regex(text, _ZONE, "")
    base = pc.replace_substring(base, "/", "-")
    base = pc.replace_substring(base, "T", " ")
    try:
        ts = base.cast(pa.timestamp("ms"))
    except pa.ArrowInvalid as e:   # e.g. month 13: the pattern matched, the calendar did not
        raise DataError(f"column {name!r} holds a date that does not exist ({str(e).splitlines()[0]})") from None
    if offsets is not None:
        ms = pc.subtract(ts.cast(pa.int64()), pa.chunked_array([offsets * 1000]))
        ts = ms.cast(pa.timestamp("ms"))
    return ts


def _offset_seconds(zone) -> np.ndarray | None:
    """Seconds east of UTC per row from a regex match of the zone ("Z", "+02:00", "-0530"); None if none."""
    matched = pc.is_valid(zone)
    if not pc.any(matched).as_py():
        return None
    z = pc.fill_null(pc.struct_field(zone, "z"), "Z").to_pylist()
    out = np.zeros(len(z), np.int64)
    for i, v in enumerate(z):
        if v and v != "Z":
            digits = v[1:].replace(":", "")
            out[i] = (1 if v[0] == "+" else -1) * (int(digits[:2]) * 3600 + int(digits[2:]) * 60)
    return out


def has_times(ts: pa.ChunkedArray) -> bool:
    """Whether any value has a time of day other than midnight."""
    if ts.null_count == len(ts):
        return False
    secs = pc.add(pc.multiply(pc.hour(ts), 3600), pc.add(pc.multiply(pc.minute(ts), 60), pc.second(ts)))
    frac = pc.add(pc.millisecond(ts), pc.add(pc.microsecond(ts), pc.nanosecond(ts)))
    return bool(pc.max(pc.add(secs, frac)).as_py() or 0)


def derive(name: str, col, parts) -> list[np.ndarray]:
    """The float64 columns (NaN for missing) of one date column, one per part."""
    ts = timestamps(name, col)
    out = []
    for part in parts:
        if part == "days":
            # Counted from the wall-clock value: a zoned timestamp's local day, like day_of_year.
            local = pc.local_timestamp(ts) if ts.type.tz else ts
            v = pc.divide(local.cast(pa.int64()).cast(pa.float64()), _unit_seconds(ts.type) * DAY_SECONDS)
        elif part == "day_of_year":
            v = pc.day_of_year(ts)
        elif part == "weekday":
            v = pc.day_of_week(ts)   # Monday 0 .. Sunday 6
        elif part == "hour":
            v = pc.add(pc.hour(ts).cast(pa.float64()),
                       pc.divide(pc.add(pc.multiply(pc.minute(ts), 60), pc.second(ts)).cast(pa.float64()), 3600.0))
        else:
            raise DataError(f"unknown part {part!r} of date column {name!r}")
        v = v.cast(pa.float64())
        out.append(pc.fill_null(v, np.nan).to_numpy())
    return out


def _unit_seconds(t: pa.TimestampType) -> float:
    return {"s": 1.0, "ms": 1e3, "us": 1e6, "ns": 1e9}[t.unit]


def expand(frame, dates: list[dict]):
    """The table with each date column replaced, in place, by its numeric parts.

    A date column already expanded (its parts present, the column itself absent) is left as it is,
    and one absent altogether is left for the column check to name; numpy tables have no dates.
    """
    if not dates or not isinstance(frame, pa.Table):
        return frame
    by_name = {d["column"]: d["parts"] for d in dates}
    names = list(frame.column_names)
    if not any(n in by_name for n in names):
        return frame
    cols, out_names = [], []
    for i, name in enumerate(names):
        if name in by_name:
            derived = feature_names(name, by_name[name])
            clash = [d for d in derived if d in names]
            if clash:
                raise DataError(f"column {clash[0]!r} clashes with a feature made from the date column {name!r}; "
                                "rename or drop one of them")
            for dname, values in zip(derived, derive(name, frame.column(i), by_name[name])):
                cols.append(pa.chunked_array([values]))
                out_names.append(dname)
        else:
            cols.append(frame.column(i))
            out_names.append(name)
    return pa.Table.from_arrays(cols, names=out_names)


def check_dates(dates, names: list[str], kinds: list[str], need) -> None:
    """Validate a schema's dates against its features (need(ok, what) raises when not ok)."""
    need(isinstance(dates, list), "dates must be a list")
    seen = set()
    for d in dates:
        need(isinstance(d, dict) and set(d) == {"column", "parts"}, "a date entry needs column and parts")
        need(isinstance(d["column"], str) and d["column"] not in seen, "date columns must be distinct text")
        seen.add(d["column"])
        parts = d["parts"]
        need(isinstance(parts, list) and parts and all(p in PARTS for p in parts) and len(set(parts)) == len(parts),
             f"date parts must be among {', '.join(PARTS)}")
        for f in feature_names(d["column"], parts):
            need(f in names and kinds[names.index(f)] == "numeric", f"the date feature {f!r} is not a numeric feature")


def _plain_text(col) -> pa.ChunkedArray:
    col = col if isinstance(col, pa.ChunkedArray) else pa.chunked_array([col])
    if pa.types.is_dictionary(col.type):
        col = col.cast(col.type.value_type)
    return col.cast(pa.string()) if col.type != pa.string() else col
