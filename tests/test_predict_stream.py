"""baggr predict streams a table through the model in batches: the same figures as scoring it whole
(CSV, compressed CSV, Parquet; batches where a column is all missing), and a bad cell in a later
batch is a one-line DataError."""
import gzip
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
import pytest

import baggr
from baggr.cli.commands import _predict_stream
from baggr.data.batches import Batches

DATA = Path(__file__).parent / "data"


@pytest.fixture(scope="module")
def model():
    return baggr.load(DATA / "v1_hard.npz")


def _rows(tmp_path):
    text = (DATA / "v1_classes_rows.csv").read_text().splitlines()
    # rows 100-139 lose every x3: a batch of them holds no number in that column
    head = text[0].split(",")
    j = head.index("x3")
    body = [line.split(",") for line in text[1:]]
    for r in body[100:140]:
        r[j] = ""
    path = tmp_path / "rows.csv"
    path.write_text("\n".join([",".join(head)] + [",".join(r) for r in body]) + "\n")
    return path


@pytest.mark.parametrize("fmt", ["csv", "csv.gz", "parquet"])
@pytest.mark.parametrize("out_kind", ["csv", "parquet"])
def test_streamed_predictions_equal_whole_table_ones(model, tmp_path, fmt, out_kind):
    csv = _rows(tmp_path)
    whole = pacsv.read_csv(csv, convert_options=pacsv.ConvertOptions(null_values=[""], strings_can_be_null=True))
    src = csv
    if fmt == "csv.gz":
        src = tmp_path / "rows.csv.gz"
        src.write_bytes(gzip.compress(csv.read_bytes()))
    elif fmt == "parquet":
        src = tmp_path / "rows.parquet"
        pq.write_table(whole, src, row_group_size=30)
    batches = Batches(src, model.schema.names, model.schema.kinds, rows=40, block_bytes=1 << 10)
    out = tmp_path / f"out.{out_kind}"
    n = _predict_stream(model, batches, out, out_kind)
    assert n == whole.num_rows == 240 and batches.done > 0
    got = pq.read_table(out) if out_kind == "parquet" else pacsv.read_csv(out)
    shares = model.vote_shares(whole)   # the whole table at once (numpy, an outside check of the batching)
    assert got.column("prediction").to_pylist() == [model.classes[k] for k in np.argmax(shares, axis=1)]
    for k, c in enumerate(model.classes):
        np.testing.assert_array_equal(got.column(f"share_{c}").to_numpy(), shares[:, k])


def test_a_bad_cell_in_a_later_batch_is_a_data_error(model, tmp_path):
    text = (DATA / "v1_classes_rows.csv").read_text().splitlines()
    head = text[0].split(",")
    row = text[200].split(",")
    row[head.index("x0")] = "not-a-number"
    text[200] = ",".join(row)
    bad = tmp_path / "bad.csv"
    bad.write_text("\n".join(text) + "\n")
    out = tmp_path / "o.csv"
    with pytest.raises(baggr.DataError, match="cannot read"):
        _predict_stream(model, Batches(bad, model.schema.names, model.schema.kinds, rows=40, block_bytes=1 << 10),
                        out, "csv")
    assert not out.exists() and not list(tmp_path.glob(".tmp-*"))   # no half file left behind


def test_missing_columns_are_named_before_reading(model, tmp_path):
    t = pa.table({"x0": [1.0, 2.0]})
    pq.write_table(t, tmp_path / "one.parquet")
    with pytest.raises(baggr.DataError, match="lacks 6 of the model's columns"):
        list(Batches(tmp_path / "one.parquet", model.schema.names, model.schema.kinds))


def test_the_streamed_output_follows_the_umask(model, tmp_path):
    # an ordinary new file gets 0666 less the umask (POSIX open(2), from memory); mkstemp's 0600 must not stay
    import os
    old = os.umask(0o022)
    try:
        import importlib
        import baggr.atomic as atomic
        importlib.reload(atomic)      # the module reads the umask once, at import
        import baggr.cli.commands as commands
        out = tmp_path / "out.csv"
        batches = Batches(_rows(tmp_path), model.schema.names, model.schema.kinds, rows=100)
        commands._predict_stream(model, batches, out, "csv")
    finally:
        os.umask(old)
        importlib.reload(atomic)
    assert out.stat().st_mode & 0o777 == 0o644
