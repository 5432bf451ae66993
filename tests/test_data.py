"""Tables in: reading, schema, binning and codes, checked against numpy, pyarrow and a real data file."""
import json

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
import pytest

from baggr.data import MISSING, OTHER, ArrayTable, Binning, Schema, encode, fit_binning, fit_schema, read_table
from baggr.errors import ConfigError, DataError, ModelFileError

import naive


def prepared(X, y, bins=255, **kw):
    schema, targets = fit_schema(X, y, **kw)
    binning = fit_binning(X, schema, bins=bins)
    return schema, targets, binning, encode(X, schema, binning)


# ---- binning -----------------------------------------------------------------------------------

def test_codes_equal_numpy_searchsorted_and_nan_is_missing():
    rng = np.random.default_rng(3)
    X = rng.standard_normal((5000, 3)) * [1.0, 100.0, 1e-3]
    X[rng.random(5000) < 0.1, 1] = np.nan
    _, _, b, codes = prepared(X, rng.integers(0, 2, 5000), bins=32)
    assert codes.shape == (3, 5000) and codes.dtype == np.uint8 and codes.flags.c_contiguous
    for j in range(3):
        x = X[:, j]
        want = np.searchsorted(b.edges[j], x, side="right")  # numpy as the reference for the code rule
        ok = ~np.isnan(x)
        np.testing.assert_array_equal(codes[j, ok], want[ok])
        assert np.all(codes[j, ~ok] == MISSING)  # NaN is missing: the brief's rule, 255
        assert b.n_bins[j] == len(b.edges[j]) + 1 <= 32
    # Definition, one value at a time (tests/naive.py): code = number of edges <= value.
    assert [naive.bin_code(v, b.edges[1]) for v in X[:200, 1]] == codes[1, :200].tolist()


def test_continuous_quantile_edges_give_equal_bins():
    rng = np.random.default_rng(4)
    x = rng.standard_normal(255 * 400)
    _, _, b, codes = prepared(x[:, None], rng.integers(0, 2, len(x)))
    q = np.unique(np.quantile(x, np.arange(1, 255) / 255))  # numpy's quantiles as the reference
    np.testing.assert_array_equal(b.edges[0], q)
    counts = np.bincount(codes[0], minlength=255)
    # Quantile bins of continuous data hold n/bins rows each, up to interpolation (definition of quantiles).
    assert b.n_bins[0] == 255 and counts.min() >= 398 and counts.max() <= 402


def test_few_distinct_values_give_one_bin_each_with_midpoint_edges():
    rng = np.random.default_rng(5)
    values = np.array([-3.0, 0.0, 0.5, 2.0, 10.0, 1e6])
    x = rng.choice(values, 3000)
    _, _, b, codes = prepared(x[:, None], rng.integers(0, 2, 3000), bins=8)
    np.testing.assert_array_equal(b.edges[0], (values[:-1] + values[1:]) / 2)  # midpoints (the brief's rule)
    assert b.n_bins[0] == 6
    for k, v in enumerate(values):
        assert set(codes[0, x == v].tolist()) == {k}  # one bin per distinct value


def test_adjacent_floats_stay_in_separate_bins():
    # The midpoint of two adjacent doubles rounds onto one of them (IEEE 754 rounding; from memory).
    a = 1.0
    c = np.nextafter(a, 2.0)
    x = np.array([a, c] * 50)
    _, _, b, codes = prepared(x[:, None], np.arange(100) % 2)
    assert b.n_bins[0] == 2
    assert set(codes[0, x == a].tolist()) == {0} and set(codes[0, x == c].tolist()) == {1}


def test_infinities_go_to_end_bins_and_do_not_move_edges():
    x = np.array([np.inf, -np.inf, 1.0, 2.0, 3.0, np.nan] * 10)
    _, _, b, codes = prepared(x[:, None], np.arange(60) % 2)
    np.testing.assert_array_equal(b.edges[0], [1.5, 2.5])  # midpoints of the finite values only
    assert codes[0, 0] == 2 and codes[0, 1] == 0 and codes[0, 5] == MISSING  # +inf top, -inf bottom, NaN 255


def test_all_missing_and_constant_columns_have_one_bin():
    X = np.column_stack([np.full(50, np.nan), np.full(50, 7.0), np.arange(50.0)])
    _, _, b, codes = prepared(X, np.arange(50) % 2)
    assert b.n_bins.tolist()[:2] == [1, 1]
    assert np.all(codes[0] == MISSING) and np.all(codes[1] == 0)  # the brief's rules for these columns


def test_more_distinct_values_than_bins_caps_the_bins():
    x = np.arange(1001.0)
    _, _, b, codes = prepared(x[:, None], np.arange(1001) % 2, bins=10)
    # Deciles of 0..1000 are 100, 200, ..., 900 (numpy's quantile as reference), data values themselves:
    # a value equal to an edge goes above it (code <= t exactly when value < edges[t]).
    np.testing.assert_array_equal(b.edges[0], np.quantile(x, np.arange(1, 10) / 10))
    np.testing.assert_array_equal(b.edges[0], np.arange(100.0, 1000.0, 100.0))
    assert b.n_bins[0] == 10 and codes[0, 99] == 0 and codes[0, 100] == 1 and codes[0, 1000] == 9


def test_rare_values_kept_when_sampling_a_large_column():
    # Over 200,000 rows the quantiles look at a sample of 4 in 5 rows; 30 values seen once each must
    # still get their own bins (a sample would miss some: all 30 are in it with chance 0.8**30 ~ 0.1%).
    n = 250_000
    x = np.zeros(n)
    x[: n // 2] = 1.0
    x[np.arange(30) * 8000 + 7] = 10.0 + np.arange(30)
    s, _ = fit_schema(x[:, None], np.arange(n) % 2)
    b = fit_binning(x[:, None], s)
    u = np.concatenate(([0.0, 1.0], 10.0 + np.arange(30)))
    np.testing.assert_array_equal(b.edges[0], (u[:-1] + u[1:]) / 2)  # midpoints of all 32 values


def test_heavy_ties_leave_no_empty_bin():
    # Half the values are 0: several quantiles fall on it; no bin may be left empty (common practice).
    rng = np.random.default_rng(8)
    x = np.where(rng.random(20_000) < 0.5, 0.0, rng.exponential(size=20_000))
    _, _, b, codes = prepared(x[:, None], np.arange(20_000) % 2)
    counts = np.bincount(codes[0], minlength=b.n_bins[0])
    assert len(counts) == b.n_bins[0] and counts.min() > 0 and counts[0] == np.count_nonzero(x == 0)


def test_edges_do_not_depend_on_the_target():
    rng = np.random.default_rng(6)
    X = rng.standard_normal((2000, 4))
    y = (X[:, 0] > 0).astype(int)
    *_, codes = prepared(X, y)
    *_, codes_perm = prepared(X, rng.permutation(y))
    # No target information in the binning (DESIGN.md invariant): permuting y changes nothing.
    np.testing.assert_array_equal(codes, codes_perm)


def test_input_dtypes_and_layouts_give_the_same_codes():
    rng = np.random.default_rng(7)
    X = rng.integers(-50, 50, (3000, 3)).astype(np.float64)
    s, _, b, codes = prepared(X, np.arange(3000) % 2, bins=16)
    for other in (np.asfortranarray(X), X.astype(np.float32), X.astype(np.int16), X[::-1][::-1].copy()):
        np.testing.assert_array_equal(encode(other, s, b), codes)
    ro = X.copy()
    ro.flags.writeable = False
    np.testing.assert_array_equal(encode(ro, s, b), codes)
    # An Arrow table of the same numbers codes the same (numeric path through pyarrow).
    t = pa.table({f"x{j}": X[:, j] for j in range(3)})
    np.testing.assert_array_equal(encode(t, s, b), codes)


def test_bins_out_of_range_is_a_config_error():
    X = np.arange(10.0)[:, None]
    s, _ = fit_schema(X, np.arange(10) % 2)
    with pytest.raises(ConfigError, match="bins"):
        fit_binning(X, s, bins=256)


def test_binning_arrays_round_trip_and_validation():
    t = pa.table({"a": ["x", "y", "z"] * 20, "b": np.arange(60.0), "c": np.ones(60)})
    s, _, b, _ = prepared(t, np.arange(60) % 2)
    arrays = b.to_arrays()
    assert all(isinstance(a, np.ndarray) and a.dtype.kind in "fiu" for a in arrays.values())
    b2 = Binning.from_arrays(dict(arrays, other=np.zeros(3)))
    assert b2.edges[0] is None and b2.n_bins.tolist() == b.n_bins.tolist() == [3, 60, 1]
    np.testing.assert_array_equal(b2.edges[1], b.edges[1])
    bad_cases = [
        dict(arrays, binning_edges=arrays["binning_edges"][::-1].copy()),        # not increasing
        dict(arrays, binning_n_bins=arrays["binning_n_bins"].astype(np.int64)),  # wrong dtype
        dict(arrays, binning_offsets=arrays["binning_offsets"][:-1]),           # wrong length
        dict(arrays, binning_is_cat=np.array([0, 0, 0], np.uint8)),              # edges vs n_bins
        {k: v for k, v in arrays.items() if k != "binning_edges"},               # missing key
    ]
    for bad in bad_cases:
        with pytest.raises(ModelFileError, match="binning"):
            Binning.from_arrays(bad)


# ---- categorical -------------------------------------------------------------------------------

def test_levels_sorted_codes_and_missing():
    t = pa.table({"colour": ["red", "blue", None, "green", "blue"] * 4, "n": np.arange(20.0)})
    s, _, b, codes = prepared(t, np.arange(20) % 2)
    assert s.kinds == ["categorical", "numeric"] and s.levels[0] == ["blue", "green", "red"]
    assert codes[0, :5].tolist() == [2, 0, MISSING, 1, 0]
    assert b.is_cat.tolist() == [1, 0] and b.n_bins[0] == 3
    # A dictionary-encoded column is the same column (Arrow's dictionary type).
    td = t.set_column(0, "colour", t.column("colour").dictionary_encode())
    np.testing.assert_array_equal(encode(td, s, b), codes)


def test_pooling_past_255_levels_keeps_the_254_most_frequent():
    # 300 levels: level i appears 300 - i times, so the 254 most frequent are L000..L253.
    values = [f"L{i:03d}" for i in range(300) for _ in range(300 - i)]
    t = pa.table({"c": values})
    s, _, b, codes = prepared(t, np.arange(len(values)) % 2)
    assert s.levels[0] == [f"L{i:03d}" for i in range(254)] + [OTHER] and b.n_bins[0] == 255
    c = np.array(values)
    assert np.all(codes[0][c == "L299"] == 254) and np.all(codes[0][c == "L007"] == 7)
    # Unseen levels of a pooled feature join "(other)"; a null stays missing.
    new = pa.table({"c": ["L001", "never seen", None]})
    assert encode(new, s, b)[0].tolist() == [1, 254, MISSING]


def test_pooling_ties_broken_by_text_order():
    # 260 levels with equal counts: the 254 first in text order are kept (the brief's tie rule).
    values = [f"v{i:03d}" for i in range(260)] * 3
    s, _ = fit_schema(pa.table({"c": values}), np.arange(780) % 2)
    assert s.levels[0][:-1] == [f"v{i:03d}" for i in range(254)]


def test_identifier_like_column_is_refused():
    t = pa.table({"customer": [f"id-{i}" for i in range(1000)], "x": np.arange(1000.0)})
    with pytest.raises(DataError, match="customer.*identifier"):
        fit_schema(t, np.arange(1000) % 2)


def test_unseen_level_is_missing():
    t = pa.table({"c": ["a", "b", "a", "b"]})
    s, _, b, _ = prepared(t, [0, 1, 0, 1])
    assert encode(pa.table({"c": ["b", "zzz", "a"]}), s, b)[0].tolist() == [1, MISSING, 0]


# ---- reading -----------------------------------------------------------------------------------

def small_table():
    return pa.table({"temp": [1.5, None, 3.25, -4.0], "site": ["north", "south", None, "north"],
                     "count": pa.array([3, 1, 4, None], pa.int64()), "ok": [True, False, True, True],
                     "label": ["a", "b", "a", "b"]})


def test_csv_round_trip(tmp_path):
    t = small_table()
    path = tmp_path / "t.csv"
    pacsv.write_csv(t, path)
    X, y = read_table(path, target="label")
    assert X.column_names == ["temp", "site", "count", "ok"] and y.to_pylist() == ["a", "b", "a", "b"]
    assert X.column("temp").to_pylist() == [1.5, None, 3.25, -4.0]
    assert X.column("site").to_pylist() == ["north", "south", None, "north"]
    s, targets = fit_schema(X, y, target="label")
    assert s.kinds == ["numeric", "categorical", "numeric", "numeric"] and targets.tolist() == [0, 1, 0, 1]
    tsv = tmp_path / "t.tsv"
    pacsv.write_csv(t, tsv, pacsv.WriteOptions(delimiter="\t"))
    assert read_table(tsv).equals(read_table(path))


def test_txt_delimiter_sniffed_and_compressed_csv(tmp_path):
    import gzip
    (tmp_path / "t.txt").write_text("a\tb\n1\tx\n2\ty\n")
    assert read_table(tmp_path / "t.txt").column_names == ["a", "b"]  # tab-separated, found from the header
    with gzip.open(tmp_path / "t.csv.gz", "wt") as f:
        f.write("a,b\n1,x\n2,y\n")
    assert read_table(tmp_path / "t.csv.gz").column("b").to_pylist() == ["x", "y"]  # pyarrow decompresses


def test_arrow_stream_input_and_empty_column(tmp_path):
    t = pa.table({"a": [1.0, 2.0, 3.0], "gone": pa.nulls(3)})
    reader = pa.RecordBatchReader.from_batches(t.schema, t.to_batches())  # speaks the Arrow stream protocol
    X = read_table(reader)
    assert X.equals(t)
    s, _, b, codes = prepared(X, [0, 1, 0])
    assert s.kinds == ["numeric", "numeric"] and b.n_bins[1] == 1 and np.all(codes[1] == MISSING)


def test_csv_marks_usual_missing_tokens(tmp_path):
    path = tmp_path / "m.csv"
    path.write_text("a,b\n1,x\nNA,?\nnan,NULL\n,y\n4,null\n")
    t = read_table(path)
    assert t.column("a").to_pylist() == [1, None, None, None, 4]  # the brief's list of missing markers
    assert t.column("b").to_pylist() == ["x", None, None, "y", None]


def test_parquet_round_trip(tmp_path):
    t = small_table()
    pq.write_table(t, tmp_path / "t.parquet")
    assert read_table(tmp_path / "t.parquet").equals(t)
    X, y = read_table(str(tmp_path / "t.parquet"), "label")
    assert X.num_columns == 4 and y.to_pylist() == ["a", "b", "a", "b"]


def test_numpy_input_is_wrapped_without_copying():
    a = np.arange(12.0).reshape(4, 3)
    t = read_table(a)
    assert isinstance(t, ArrayTable) and np.shares_memory(t.array, a) and t.column_names == ["x0", "x1", "x2"]
    X, y = read_table(a, target="x1")
    assert X.column_names == ["x0", "x2"] and y.to_pylist() == [1.0, 4.0, 7.0, 10.0]
    s, _, b, codes = prepared(X, [0, 1, 0, 1])
    assert s.names == ["x0", "x2"] and codes[1].tolist() == [0, 1, 2, 3]
    assert X.to_arrow().column("x2").to_pylist() == [2.0, 5.0, 8.0, 11.0]


def test_dict_input():
    t = read_table({"a": np.array([1.0, np.nan, 3.0]), "b": ["x", None, "y"], "c": [True, False, True]})
    assert t.column_names == ["a", "b", "c"]
    s, _, b, codes = prepared(t, [0, 1, 1])
    assert s.kinds == ["numeric", "categorical", "numeric"]
    assert codes.tolist() == [[0, MISSING, 1], [0, MISSING, 1], [1, 0, 1]]  # bool as 0/1


# ---- schema and targets ------------------------------------------------------------------------

def test_class_order_numbers_numerically_text_by_code_point_bools_false_first():
    X = np.zeros((6, 1))
    s, t = fit_schema(X, [10, 9, 100, 9, 10, 100])
    assert s.classes == [9, 10, 100] and t.tolist() == [1, 0, 2, 0, 1, 2]  # numeric order, not text order
    s, t = fit_schema(X, ["b", "B", "a", "b", "a", "B"])
    assert s.classes == ["B", "a", "b"] and t.dtype == np.int32  # code-point order (Python's str order)
    s, t = fit_schema(X, [True, False, True, True, False, True])
    assert s.classes == [False, True] and t.tolist() == [1, 0, 1, 1, 0, 1]


def test_task_from_target_type():
    X = np.zeros((4, 1))
    s, t = fit_schema(X, np.array([0.5, 1.5, 2.0, 3.0]))
    assert s.task == "regression" and s.classes == [] and t.dtype == np.float64
    s, t = fit_schema(X, np.array([1.0, 2.0, 1.0, 2.0]), task="classes")
    assert s.task == "classes" and s.classes == [1.0, 2.0] and t.tolist() == [0, 1, 0, 1]
    s, t = fit_schema(X, [1, 2, 3, 4], task="regression")
    assert s.task == "regression" and t.tolist() == [1.0, 2.0, 3.0, 4.0]


def test_schema_json_round_trip_and_validation():
    t = pa.table({"a": ["x", "y"] * 5, "b": np.arange(10.0)})
    s, _ = fit_schema(t, [True, False] * 5, target="flag")
    d = json.loads(json.dumps(s.to_json()))
    assert Schema.from_json(d) == s
    bad_cases = [dict(d, kinds=["numeric"]), dict(d, task="guess"), dict(d, classes=[True]),
                 dict(d, classes=[True, 1]), dict(d, levels=[None, None]), dict(d, names=["a", "a"]),
                 dict(d, extra=1), {k: v for k, v in d.items() if k != "target"}, [1, 2],
                 dict(d, classes=[True, False])]
    for bad in bad_cases:
        with pytest.raises(ModelFileError, match="schema"):
            Schema.from_json(bad)


# ---- errors a user can cause -------------------------------------------------------------------

def test_file_errors(tmp_path):
    with pytest.raises(DataError, match="not found"):
        read_table(tmp_path / "absent.csv")
    (tmp_path / "empty.csv").write_text("")
    with pytest.raises(DataError, match="empty"):
        read_table(tmp_path / "empty.csv")
    (tmp_path / "header.csv").write_text("a,b\n")
    with pytest.raises(DataError, match="no rows"):
        read_table(tmp_path / "header.csv")
    (tmp_path / "ragged.csv").write_text("a,b\n1,2\n3,4,5\n")
    with pytest.raises(DataError, match="3 fields.*header has 2"):
        read_table(tmp_path / "ragged.csv")
    (tmp_path / "junk.parquet").write_text("not parquet at all")
    with pytest.raises(DataError, match="Parquet"):
        read_table(tmp_path / "junk.parquet")
    (tmp_path / "t.xlsx").write_text("x")
    with pytest.raises(DataError, match="unknown file type"):
        read_table(tmp_path / "t.xlsx")
    (tmp_path / "dup.csv").write_text("a,b,a\n1,2,3\n")
    with pytest.raises(DataError, match="duplicate.*'a'"):
        read_table(tmp_path / "dup.csv")


def test_unknown_target_lists_columns_and_hints_at_the_delimiter(tmp_path):
    with pytest.raises(DataError, match="'spam' not found.*'temp', 'site'"):
        read_table(small_table(), target="spam")
    (tmp_path / "semi.csv").write_text("a;b;label\n1;2;x\n3;4;y\n")
    with pytest.raises(DataError, match="single column.*delimiter ';'"):
        read_table(tmp_path / "semi.csv", target="label")


def test_target_errors():
    X = np.zeros((4, 1))
    with pytest.raises(DataError, match="target 'y' has 2 missing"):
        fit_schema(X, ["a", None, "b", None], target="y")
    with pytest.raises(DataError, match="1 missing"):
        fit_schema(X, [1.0, np.nan, 2.0, 3.0])
    with pytest.raises(DataError, match="only one class"):
        fit_schema(X, ["a"] * 4)
    with pytest.raises(DataError, match="infinite"):
        fit_schema(X, [1.0, np.inf, 2.0, 3.0])
    with pytest.raises(DataError, match="text; regression"):
        fit_schema(X, ["a", "b", "a", "b"], task="regression")
    with pytest.raises(DataError, match="3 values but the table has 4 rows"):
        fit_schema(X, [1, 2, 3])
    with pytest.raises(DataError, match="300 distinct values"):
        fit_schema(np.zeros((300, 1)), np.arange(300) / 7, task="classes")
    with pytest.raises(DataError, match="both a feature and the target"):
        fit_schema(pa.table({"y": [1, 2]}), [0, 1], target="y")


def test_numeric_column_with_a_stray_text_value(tmp_path):
    rows = "\n".join(f"{20 + i * 0.5},a" for i in range(30))
    (tmp_path / "t.csv").write_text("temp,site\n" + rows.replace("27.5,a", "n/a,a") + "\n")
    X = read_table(tmp_path / "t.csv")
    assert X.column("temp").type == pa.string()  # pyarrow reads it as text...
    with pytest.raises(DataError, match="column 'temp' is numeric but row 16 holds 'n/a'"):
        fit_schema(X, np.arange(30) % 2)  # ...but 29 of 30 values are numbers
    # Mostly text with a few numbers is an ordinary categorical column.
    s, _ = fit_schema(pa.table({"c": ["a", "b", "1", "c"] * 5}), np.arange(20) % 2)
    assert s.kinds == ["categorical"]


def test_unsupported_types_are_named():
    # (timestamps and dates are features: tests/test_dates.py)
    t = pa.table({"took": pa.array([0, 1, 2], pa.duration("s")), "x": [1.0, 2.0, 3.0]})
    with pytest.raises(DataError, match=r"column 'took' has type duration\[s\].*leave it out \(--drop took\)"):
        fit_schema(t, [0, 1, 0])
    t = pa.table({"tags": [[1], [2, 3], []]})
    with pytest.raises(DataError, match="'tags' has type list"):
        fit_schema(t, [0, 1, 0])


def test_numpy_shape_and_dtype_errors():
    with pytest.raises(DataError, match="2-D"):
        read_table(np.zeros(5))
    with pytest.raises(DataError, match="2-D"):
        read_table(np.zeros((2, 2, 2)))
    with pytest.raises(DataError, match="dtype object"):
        read_table(np.array([[1, "a"]], dtype=object))
    with pytest.raises(DataError, match="cannot read a table from a set"):
        read_table({1, 2})


def test_prediction_column_checks():
    t = pa.table({"temp": [1.0, 2.0, 3.0, 4.0], "site": ["n", "s", "n", "s"], "w": [1, 2, 3, 4]})
    s, _, b, codes = prepared(t, [0, 1, 0, 1])
    with pytest.raises(DataError, match="lacks 2 of the model's columns: 'temp', 'w'"):
        encode(pa.table({"site": ["n"]}), s, b)
    with pytest.raises(DataError, match="'temp' should be numeric but holds text"):
        encode(pa.table({"temp": ["warm"], "site": ["n"], "w": [1]}), s, b)
    with pytest.raises(DataError, match="'site' should be categorical .* holds numeric"):
        encode(pa.table({"temp": [1.0], "site": [3], "w": [1]}), s, b)
    with pytest.raises(DataError, match="'site' should be categorical"):
        encode(np.zeros((2, 3)), s, b)
    # A column that is empty in the new table is missing whatever its kind was.
    blank = encode(pa.table({"temp": pa.nulls(2), "site": pa.nulls(2), "w": [1, 9]}), s, b)
    assert blank.tolist() == [[MISSING, MISSING], [MISSING, MISSING], [0, 3]]
    # Extra columns are ignored and order does not matter.
    more = pa.table({"extra": ["q"] * 4, "w": [1, 2, 3, 4], "site": ["n", "s", "n", "s"], "temp": [1.0, 2, 3, 4]})
    np.testing.assert_array_equal(encode(more, s, b), codes)
    sn, _, bn, _ = prepared(np.zeros((4, 3)), [0, 1, 0, 1])
    with pytest.raises(DataError, match="2 columns but the model has 3"):
        encode(np.zeros((4, 2)), sn, bn)


# ---- real data ---------------------------------------------------------------------------------

def test_penguins():
    X, y = read_table(naive.penguins_csv_path(), target="species")
    s, targets, b, codes = prepared(X, y, target="species")
    # Horst, Hill & Gorman (2020), palmerpenguins documentation: 344 penguins of 3 species.
    assert X.num_rows == 344
    assert s.classes == ["Adelie", "Chinstrap", "Gentoo"] and np.bincount(targets).tolist() == [152, 68, 124]
    assert s.kinds[s.names.index("island")] == "categorical"
    assert s.levels[s.names.index("island")] == ["Biscoe", "Dream", "Torgersen"]
    assert s.levels[s.names.index("sex")] == ["female", "male"]
    # Same documentation: sex is missing for 11 penguins, and 2 have no body measurements at all.
    assert np.count_nonzero(codes[s.names.index("sex")] == MISSING) == 11
    measures = [s.names.index(n) for n in ("bill_length_mm", "bill_depth_mm", "flipper_length_mm", "body_mass_g")]
    assert np.count_nonzero(np.all(codes[measures] == MISSING, axis=0)) == 2
