"""Reading a table file in batches of rows (CSV or Parquet), for scoring tables larger than memory.

Only the model's columns are read, each as the kind the model knows it by (numbers as float64,
categorical columns as text; a date column, from which the model's date features are derived, and
the columns kept beside the predictions as text in a CSV), so every batch has the same types
whatever its rows hold.
"""
from __future__ import annotations

import os
from pathlib import Path

import pyarrow as pa

from baggr.data.dates import feature_names
from baggr.data.table import (COMPRESSED, CSV_SUFFIXES, NULL_VALUES, PARQUET_SUFFIXES, _arrow_message,
                              _first_line, _sniff_delimiter, single_column_hint)
from baggr.errors import DataError


class Batches:
    """Batches of about `rows` rows of a table file's columns `names` (kinds: "numeric" or
    "categorical"); .done and .total measure progress (bytes of a plain CSV, else rows). A CSV is
    parsed in blocks of block_bytes, so a batch holds at least one block's rows.

    dates: the schema's date columns (each read in place of the features made from it); keep: more
    columns to read as they are (copied beside the predictions); delimiter: of a text table.
    """

    def __init__(self, path, names: list[str], kinds: list[str], rows: int = 65536, block_bytes: int = 1 << 22,
                 *, dates=(), keep=(), delimiter: str | None = None):
        self.path = Path(path).expanduser()
        self.rows, self.block_bytes, self.delimiter = int(rows), int(block_bytes), delimiter
        made = {f: d["column"] for d in dates for f in feature_names(d["column"], d["parts"])}
        self.model_columns = list(dict.fromkeys(made.get(n, n) for n in names))
        self.keep = [k for k in keep if k not in self.model_columns]
        self.names = self.model_columns + self.keep        # the columns read
        kind_of = dict(zip(names, kinds))
        self.kinds = ["numeric" if kind_of.get(n) == "numeric" else "text" for n in self.names]
        if not self.path.exists():
            raise DataError(f"file not found: {self.path}")
        if self.path.is_dir():
            raise DataError(f"{self.path} is a folder, not a table file")
        suffixes = [s.lower() for s in self.path.suffixes]
        self.compressed = bool(suffixes) and suffixes[-1] in COMPRESSED
        kind = (suffixes[:-1] if self.compressed else suffixes)[-1:] or [""]
        self.kind = kind[0]
        if self.kind not in CSV_SUFFIXES and self.kind not in PARQUET_SUFFIXES:
            raise DataError(f"{self.path}: unknown file type {self.kind or '(no suffix)'!r}; "
                            "use .csv, .tsv, .txt, .parquet or .pq")
        if self.path.stat().st_size == 0:
            raise DataError(f"{self.path} is empty")
        if delimiter is not None and self.kind in PARQUET_SUFFIXES:
            raise DataError(f"{self.path} is a Parquet file: a delimiter applies to text tables only")
        self.done, self.total = 0, None

    def _missing(self, columns) -> None:
        have = set(columns)
        missing = [n for n in self.model_columns if n not in have]
        if missing:
            shown = ", ".join(repr(m) for m in missing[:8]) + (", ..." if len(missing) > 8 else "")
            raise DataError(f"the table lacks {len(missing)} of the model's columns: {shown}"
                            f"{single_column_hint(list(columns))}")
        lacking = [k for k in self.keep if k not in have]
        if lacking:
            raise DataError(f"--keep: {self.path} has no column {', '.join(map(repr, lacking))}"
                            f"{single_column_hint(list(columns))}")

    def __iter__(self):
        try:
            if self.kind in PARQUET_SUFFIXES:
                yield from self._parquet()
            else:
                yield from self._csv()
        except pa.ArrowInvalid as e:
            raise DataError(_arrow_message(self.path, e)) from None
        except OSError as e:
            raise DataError(f"cannot read {self.path}: {_first_line(e)}") from None

    def _parquet(self):
        import pyarrow.parquet as pq
        f = pq.ParquetFile(self.path)
        self._missing(f.schema_arrow.names)
        self.total = f.metadata.num_rows
        for batch in f.iter_batches(batch_size=self.rows, columns=self.names):
            self.done += batch.num_rows
            yield pa.Table.from_batches([batch])

    def _csv(self):
        import pyarrow.csv as pacsv
        delimiter = self.delimiter or CSV_SUFFIXES[self.kind] or _sniff_delimiter(self.path)
        parse = pacsv.ParseOptions(delimiter=delimiter)
        with pacsv.open_csv(self.path, parse_options=parse) as head:     # the header, from the first block
            self._missing(head.schema.names)
        types = {n: pa.float64() if k == "numeric" else pa.string() for n, k in zip(self.names, self.kinds)}
        convert = pacsv.ConvertOptions(null_values=NULL_VALUES, strings_can_be_null=True, column_types=types,
                                       include_columns=self.names)
        source = open(self.path, "rb") if not self.compressed else self.path
        try:
            self.total = None if self.compressed else os.fstat(source.fileno()).st_size
            read = pacsv.ReadOptions(block_size=self.block_bytes)
            with pacsv.open_csv(source, read_options=read, parse_options=parse, convert_options=convert) as reader:
                pending = []
                n = 0
                for batch in reader:
                    pending.append(batch)
                    n += batch.num_rows
                    if n >= self.rows:
                        yield self._take(pending, source)
                        pending, n = [], 0
                if pending:
                    yield self._take(pending, source)
        finally:
            if not self.compressed:
                source.close()

    def _take(self, pending, source):
        table = pa.Table.from_batches(pending)
        self.done = source.tell() if not self.compressed else self.done + table.num_rows
        return table
