"""Reading tables: files, Arrow tables, numpy arrays and dicts of columns, one column at a time."""
from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from baggr.errors import DataError

# Cells that mean "missing" in a text file.
NULL_VALUES = ["", "NA", "NaN", "nan", "null", "NULL", "?"]
CSV_SUFFIXES = {".csv": ",", ".tsv": "\t", ".txt": None}
PARQUET_SUFFIXES = (".parquet", ".pq")
COMPRESSED = (".gz", ".bz2", ".zst", ".lz4")

# A number as text (decimal, exponent, inf, nan), for spotting numeric columns pyarrow read as text.
_NUMBER = r"(?i)^\s*[+-]?(\d+\.?\d*|\.\d+)(e[+-]?\d+)?\s*$|^\s*[+-]?(inf|infinity|nan)\s*$"


class ArrayTable:
    """A numeric numpy 2-D array seen as a table of columns x0, x1, ..., without copying it."""

    def __init__(self, array: np.ndarray, columns: list[int] | None = None):
        self.array = array
        self.columns = list(range(array.shape[1])) if columns is None else list(columns)
        self.column_names = [f"x{j}" for j in self.columns]

    @property
    def num_rows(self) -> int:
        return self.array.shape[0]

    @property
    def num_columns(self) -> int:
        return len(self.columns)

    def values(self, i: int) -> np.ndarray:
        """Column i as a (strided) view of the array, no copy."""
        return self.array[:, self.columns[i]]

    def column(self, key) -> pa.ChunkedArray:
        """Column i (or named) as Arrow, copying that one column; NaN stays NaN."""
        i = self.column_names.index(key) if isinstance(key, str) else key
        return pa.chunked_array([pa.array(np.ascontiguousarray(self.values(i), dtype=np.float64))])

    def drop(self, name: str) -> "ArrayTable":
        i = self.column_names.index(name)
        return ArrayTable(self.array, self.columns[:i] + self.columns[i + 1:])

    def to_arrow(self) -> pa.Table:
        """A full Arrow copy (for small arrays; training never needs it)."""
        return pa.table({n: self.column(i) for i, n in enumerate(self.column_names)})


def read_table(source, target: str | None = None, *, drop=None, only=None, delimiter: str | None = None):
    """Read a table; with target, split it into (X, y) with y a pyarrow ChunkedArray.

    source: a path (.csv/.tsv/.txt, .parquet/.pq, optionally compressed .gz/.bz2/...), a pyarrow
    Table or RecordBatch, a numeric numpy 2-D array (NaN = missing; columns x0, x1, ...; wrapped in
    an ArrayTable without copying), a dict of column name -> 1-D array, or an ArrayTable.
    drop: column names to leave out; only: the feature columns to keep (the target is always kept);
    both may be given (only, then drop). The command's --drop and --only.
    delimiter: the field delimiter of a text table (default: from the suffix; sniffed for .txt).
    """
    table = _as_table(source, delimiter)
    if table.num_rows == 0:
        raise DataError(f"{_label(source)} has no rows")
    if table.num_columns == 0:
        raise DataError(f"{_label(source)} has no columns")
    names = list(table.column_names)
    seen = set()
    dup = sorted({n for n in names if n in seen or seen.add(n)})
    if dup:
        raise DataError(f"{_label(source)} has duplicate column names: {', '.join(map(repr, dup))}")
    if target is not None and target not in names:
        raise DataError(_unknown_target(source, target, names))
    if drop or only:
        table = select_columns(table, drop=drop, only=only, target=target, label=_label(source))
    if target is None:
        return table
    y = table.column(target)
    X = table.drop(target) if isinstance(table, ArrayTable) else table.drop_columns([target])
    return X, y


def column_list(names) -> list[str]:
    """Column names from "a,b,c", a list of such texts, or None (no names)."""
    if names is None:
        return []
    if isinstance(names, str):
        names = [names]
    out = []
    for item in names:
        if not isinstance(item, str):
            raise DataError(f"column names must be text, got {item!r}")
        out.extend(n for n in item.split(",") if n != "")
    return out


def select_columns(table, *, drop=None, only=None, target: str | None = None, label: str = "the table"):
    """The table without the `drop` columns and, given `only`, with only those (and the target)."""
    names = list(table.column_names)
    drop, only = column_list(drop), column_list(only)
    unknown = [n for n in only + drop if n not in names]
    if unknown:
        shown = ", ".join(repr(n) for n in dict.fromkeys(unknown))
        raise DataError(f"{label} has no column {shown}; columns are {_names_text(names)}{single_column_hint(names)}")
    if target is not None and target in drop:
        raise DataError(f"column {target!r} is the target; it cannot be dropped")
    keep = [n for n in names if (not only or n in only or n == target) and n not in drop]
    if not [n for n in keep if n != target]:
        raise DataError(f"no feature columns are left in {label} after choosing columns")
    if isinstance(table, ArrayTable):
        return ArrayTable(table.array, [table.columns[names.index(n)] for n in keep])
    return table.select(keep)


def as_frame(X):
    """X as an Arrow table or ArrayTable (cheap when it already is one)."""
    if isinstance(X, (pa.Table, ArrayTable)):
        return X
    return read_table(X)


def _as_table(source, delimiter: str | None = None):
    if delimiter is not None and not isinstance(source, (str, Path)):
        raise DataError("a delimiter applies to text table files only")
    if isinstance(source, (ArrayTable, pa.Table)):
        return source
    if isinstance(source, pa.RecordBatch):
        return pa.Table.from_batches([source])
    if isinstance(source, (str, Path)):
        return _read_file(Path(source).expanduser(), delimiter)
    if isinstance(source, np.ndarray):
        return _wrap_array(source)
    if isinstance(source, dict):
        return _from_dict(source)
    if hasattr(source, "__arrow_c_stream__"):  # any data frame library speaking the Arrow stream protocol
        try:
            return pa.table(source)
        except (pa.ArrowException, TypeError, ValueError) as e:
            raise DataError(f"cannot convert the {type(source).__name__} to a table: {_first_line(e)}") from None
    raise DataError(f"cannot read a table from a {type(source).__name__}; "
                    "give a file path, a pyarrow Table, a numpy 2-D array or a dict of columns")


def _wrap_array(a: np.ndarray) -> ArrayTable:
    if a.ndim != 2:
        raise DataError(f"a numpy table must be 2-D (rows x features), got {a.ndim}-D with shape {a.shape}")
    if a.dtype.kind not in "biuf":
        raise DataError(f"a numpy table must hold numbers (NaN for missing), got dtype {a.dtype}; "
                        "give text columns as a dict or an Arrow table")
    return ArrayTable(a)


def _from_dict(d: dict) -> pa.Table:
    cols, length = {}, None
    for name, values in d.items():
        if not isinstance(name, str):
            raise DataError(f"column names must be text, got {name!r}")
        if isinstance(values, np.ndarray) and values.ndim != 1:
            raise DataError(f"column {name!r} must be 1-D, got shape {values.shape}")
        try:
            arr = values if isinstance(values, (pa.Array, pa.ChunkedArray)) else pa.array(values)
        except (pa.ArrowException, TypeError, ValueError) as e:
            raise DataError(f"column {name!r} cannot be read: {_first_line(e)}") from None
        if length is not None and len(arr) != length:
            raise DataError(f"column {name!r} has {len(arr)} values but the columns before it have {length}")
        length = len(arr)
        cols[name] = arr
    return pa.table(cols)


def _read_file(path: Path, delimiter: str | None = None) -> pa.Table:
    if not path.exists():
        raise DataError(f"file not found: {path}")
    if path.is_dir():
        raise DataError(f"{path} is a folder, not a table file")
    suffixes = [s.lower() for s in path.suffixes]
    if suffixes and suffixes[-1] in COMPRESSED:
        suffixes = suffixes[:-1]
    kind = suffixes[-1] if suffixes else ""
    try:
        if path.stat().st_size == 0:
            raise DataError(f"{path} is empty")
        if kind in PARQUET_SUFFIXES:
            if delimiter is not None:
                raise DataError(f"{path} is a Parquet file: a delimiter applies to text tables only")
            import pyarrow.parquet as pq
            return pq.read_table(path)
        if kind in CSV_SUFFIXES:
            return _read_csv(path, delimiter or CSV_SUFFIXES[kind])
    except pa.ArrowInvalid as e:
        raise DataError(_arrow_message(path, e)) from None
    except OSError as e:
        raise DataError(f"cannot read {path}: {_first_line(e)}") from None
    raise DataError(f"{path}: unknown file type {kind or '(no suffix)'!r}; "
                    "use .csv, .tsv, .txt, .parquet or .pq")


def _read_csv(path: Path, delimiter: str | None) -> pa.Table:
    import pyarrow.csv as pacsv
    if delimiter is None:
        delimiter = _sniff_delimiter(path)
    convert = pacsv.ConvertOptions(null_values=NULL_VALUES, strings_can_be_null=True)
    return pacsv.read_csv(path, parse_options=pacsv.ParseOptions(delimiter=delimiter), convert_options=convert)


def _sniff_delimiter(path: Path) -> str:
    """For .txt files: the most frequent of tab, comma, semicolon, bar in the header line."""
    with pa.input_stream(str(path), compression="detect") as f:  # decompresses .gz like read_csv does
        head = f.read(65536).decode("utf-8", "replace").splitlines()[:1]
    line = head[0] if head else ""
    counts = {d: line.count(d) for d in ("\t", ",", ";", "|")}
    best = max(counts, key=counts.get)
    return best if counts[best] else ","


def _arrow_message(path: Path, e: Exception) -> str:
    msg = _first_line(e)
    if msg.startswith("Empty CSV file"):
        return f"{path} is empty"
    m = re.match(r"CSV parse error: Expected (\d+) columns, got (\d+): ?(.*)", msg)
    if m:
        line = m.group(3)
        line = line if len(line) <= 60 else line[:57] + "..."
        return (f"{path}: a row has {m.group(2)} fields where the header has {m.group(1)} "
                f"({line!r}); ragged rows or the wrong delimiter (--delimiter)?")
    if "magic bytes" in msg or "Parquet" in msg:
        return f"{path} is not a readable Parquet file: {msg}"
    return f"cannot read {path}: {msg}"


def _unknown_target(source, target: str, names: list[str]) -> str:
    return f"target column {target!r} not found in {_label(source)}; columns are {_names_text(names)}" + \
        single_column_hint(names)


def _names_text(names: list[str]) -> str:
    return ", ".join(repr(n) for n in names[:8]) + (f", ... ({len(names)} in all)" if len(names) > 8 else "")


def single_column_hint(names: list[str]) -> str:
    """When a file was read as one column: which delimiter it seems to use, and the option to give it."""
    if len(names) != 1:
        return ""
    delims = [d for d in (";", "\t", "|", ",", " ") if d in names[0]]
    if not delims:
        return "; the file was read as a single column: is the delimiter right? (--delimiter)"
    shown = "tab" if delims[0] == "\t" else repr(delims[0])
    return f"; the file was read as a single column: is the delimiter {shown}? (--delimiter {shown})"


def shell_word(name: str) -> str:
    """A column name as it is typed in a command (quoted when the shell needs it)."""
    import shlex
    return shlex.quote(name)


def _label(source) -> str:
    return str(source) if isinstance(source, (str, Path)) else "the table"


def _first_line(e: Exception) -> str:
    text = str(e).strip()
    return text.splitlines()[0] if text else type(e).__name__


# ---- column access and kinds -------------------------------------------------------------------

def column_kind(col) -> str:
    """'numeric', 'text', 'null' for an Arrow column; raise DataError for types baggr cannot use."""
    t = col.type
    if pa.types.is_dictionary(t):
        t = t.value_type
    if pa.types.is_null(t):
        return "null"
    if pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_boolean(t) or pa.types.is_decimal(t):
        return "numeric"
    if pa.types.is_string(t) or pa.types.is_large_string(t) or pa.types.is_string_view(t):
        return "text"
    return "unsupported"


def check_supported(name: str, col, hint: bool = True) -> str:
    """column_kind, raising DataError naming the column and its type when baggr cannot use it.

    hint: say how to leave the column out (training; a model's own column cannot be left out)."""
    kind = column_kind(col)
    if kind == "unsupported":
        how = f"leave it out (--drop {shell_word(name)}) or convert it" if hint else "convert it"
        raise DataError(f"column {name!r} has type {col.type}, which baggr cannot use; {how} to numbers or text")
    return kind


def as_text(col) -> pa.ChunkedArray:
    """A text (or dictionary-of-text) column as plain Arrow strings."""
    col = col if isinstance(col, pa.ChunkedArray) else pa.chunked_array([col])
    return col.cast(pa.string()) if col.type != pa.string() else col


def as_float(col) -> np.ndarray:
    """A numeric, bool or null Arrow column as float64 numpy, missing as NaN (one column's copy)."""
    col = col if isinstance(col, pa.ChunkedArray) else pa.chunked_array([col])
    if pa.types.is_dictionary(col.type):
        col = col.cast(col.type.value_type)
    if col.type != pa.float64():
        col = col.cast(pa.float64(), safe=False)
    if col.null_count:
        col = pc.fill_null(col, np.nan)
    return col.to_numpy()


def check_numeric_text(name: str, col) -> None:
    """Raise DataError if >= 90% of a text column's non-empty values are numbers but some are not."""
    col = as_text(col)
    filled = pc.fill_null(col, "")
    nonempty = pc.greater(pc.utf8_length(pc.utf8_trim_whitespace(filled)), 0)
    n_nonempty = pc.sum(nonempty).as_py() or 0
    if n_nonempty == 0:
        return
    is_num = pc.match_substring_regex(filled, _NUMBER)
    n_num = pc.sum(pc.and_(nonempty, is_num)).as_py() or 0
    if n_num == n_nonempty or n_num < 0.9 * n_nonempty:
        return  # all numbers (the user chose text) or mostly text: a categorical column
    bad = np.flatnonzero(pc.and_(nonempty, pc.invert(is_num)).to_numpy(zero_copy_only=False))
    row = int(bad[0])
    raise DataError(f"column {name!r} is numeric but row {row + 1} holds {col[row].as_py()!r} "
                    f"({len(bad)} such values; mark them missing or fix them)")
