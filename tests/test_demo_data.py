"""The demo generator's contract: deterministic, the promised columns, shares, gaps and file round trips."""
import numpy as np
import pyarrow as pa
import pytest
from pyarrow import csv, parquet
from scipy import stats

from baggr.errors import ConfigError
from demo import scenario

ROWS = 6000
SEEDS = (2026, 1, 99)

STRINGS = ("kiln", "glaze", "setter")
INTS = ("firings_since_service", "door_openings")
FLOATS = (
    "peak_temp_c",
    "ramp_c_per_min",
    "hold_min",
    "load_kg",
    "moisture_pct",
    "spread_c",
    "fan_vibration_mm_s",
)
# Intended shares of missing values per column; every other column is complete.
MISSING = {"moisture_pct": (0.06, 0.10), "setter": (0.045, 0.075), "spread_c": (0.07, 0.14)}


@pytest.fixture(scope="module")
def table():
    return scenario.generate(ROWS, 2026)


def _floats(column):
    """A numeric column as float64 with NaN for nulls."""
    return column.to_numpy(zero_copy_only=False).astype(np.float64)


def test_same_seed_gives_equal_tables_and_identical_csv_bytes(tmp_path, table):
    # Common practice, no source: a seeded generator must reproduce its output exactly.
    assert scenario.generate(ROWS, 2026).equals(table)
    a = scenario.write(tmp_path / "a.csv", rows=ROWS, seed=2026)
    b = scenario.write(tmp_path / "b.csv", rows=ROWS, seed=2026)
    assert a.read_bytes() == b.read_bytes()
    assert scenario.generate_regression(500, 5).equals(scenario.generate_regression(500, 5))


def test_different_seed_gives_different_table(table):
    # Common practice, no source: the seed must actually reach every random column.
    other = scenario.generate(ROWS, 2027)
    assert not other.equals(table)
    for name in scenario.FEATURES + (scenario.TARGET,):
        assert not other[name].equals(table[name]), name


def test_columns_types_and_levels(table):
    # The generator's own contract (common practice, no source).
    assert table.num_rows == ROWS
    assert tuple(table.column_names) == scenario.FEATURES + (scenario.TARGET,)
    assert 10 <= len(scenario.FEATURES) <= 14
    for name in STRINGS + (scenario.TARGET,):
        assert table.schema.field(name).type == pa.string(), name
    for name in INTS:
        assert table.schema.field(name).type == pa.int64(), name
    for name in FLOATS:
        assert table.schema.field(name).type == pa.float64(), name
    assert table.schema.field("element_replaced").type == pa.bool_()
    levels = {name: set(table[name].drop_null().to_pylist()) for name in STRINGS + (scenario.TARGET,)}
    assert levels["kiln"] == set(scenario.KILNS) and len(scenario.KILNS) == 12
    assert levels["glaze"] == set(scenario.GLAZES) and len(scenario.GLAZES) == 5
    assert levels["setter"] == set(scenario.SETTERS)
    assert levels[scenario.TARGET] == set(scenario.CLASSES) and len(scenario.CLASSES) == 3
    replaced = np.asarray(table["element_replaced"].to_pylist())
    assert 0.08 < replaced.mean() < 0.16  # intended 12 %


@pytest.mark.parametrize("seed", SEEDS)
def test_rare_class_share_in_range(seed):
    # The contract promises a rare class of about 4-7 %; at 6000 rows its binomial sd is ~0.3 %.
    y = np.asarray(scenario.generate(ROWS, seed)[scenario.TARGET].to_pylist())
    shares = {c: np.mean(y == c) for c in scenario.CLASSES}
    assert 0.04 <= shares[scenario.RARE_CLASS] <= 0.07
    assert min(shares, key=shares.get) == scenario.RARE_CLASS
    assert shares["pass"] > 0.6 and 0.12 < shares["rework"] < 0.3


@pytest.mark.parametrize("seed", SEEDS)
def test_missing_shares_in_range(seed):
    # The contract's intended missing shares; binomial sd at 6000 rows is below 0.4 %.
    t = scenario.generate(ROWS, seed)
    for name in t.column_names:
        share = t[name].null_count / ROWS
        low, high = MISSING.get(name, (0.0, 0.0))
        assert low <= share <= high, (name, share)


def test_spread_is_missing_not_at_random(table):
    # The contract: the spread probe drops out far more often on scrapped firings than on passed ones.
    gap = np.asarray(table["spread_c"].is_null())
    y = np.asarray(table[scenario.TARGET].to_pylist())
    assert gap[y == "scrap"].mean() > 3 * gap[y == "pass"].mean()
    # The moisture gaps are drawn at random: their share hardly moves with the class (5 binomial sd).
    m = np.asarray(table["moisture_pct"].is_null())
    sd = np.sqrt(0.08 * 0.92 / np.count_nonzero(y == "scrap"))
    assert abs(m[y == "scrap"].mean() - m.mean()) < 5 * sd


def test_skew_and_finite_outliers(table):
    # Sample skewness from scipy.stats.skew; the contract wants long right tails and a few glitches.
    for name in ("firings_since_service", "hold_min", "fan_vibration_mm_s"):
        x = _floats(table[name])
        assert stats.skew(x) > 1.0, name
    v = _floats(table["fan_vibration_mm_s"])
    assert np.isfinite(v).all()
    far = np.mean(v > 5 * np.median(v))
    # Intended 0.4 % glitches, most of them above 5x the median; a lognormal with sigma 0.45
    # alone puts only ~0.02 % there (normal tail beyond ln 5 / 0.45 = 3.6 sd, from memory).
    assert 0.001 <= far <= 0.01
    for name in FLOATS + INTS:
        x = _floats(table[name])
        assert np.isfinite(x[~np.isnan(x)]).all() and (x[~np.isnan(x)] >= 0).all(), name


def test_csv_round_trip_with_pyarrow(tmp_path, table):
    # pyarrow's own reader must read the file back as the same table. Empty cells in string
    # columns read as "" unless strings_can_be_null is set (pyarrow.csv.ConvertOptions docs).
    path = scenario.write(tmp_path / "firings.csv")
    back = csv.read_csv(path, convert_options=csv.ConvertOptions(strings_can_be_null=True))
    assert back.schema == table.schema
    assert back.equals(table)


def test_parquet_round_trip_and_regression_file(tmp_path, table):
    # pyarrow.parquet must read back the same table; the regression file swaps only the target.
    path = scenario.write(tmp_path / "firings.parquet")
    assert parquet.read_table(path).equals(table)
    reg = parquet.read_table(scenario.write(tmp_path / "cool.PARQUET", regression=True))
    assert tuple(reg.column_names) == scenario.FEATURES + (scenario.REGRESSION_TARGET,)
    assert reg.select(list(scenario.FEATURES)).equals(table.select(list(scenario.FEATURES)))


def test_regression_target_is_float_positive_and_not_linear(table):
    reg = scenario.generate_regression(ROWS, 2026)
    y = _floats(reg[scenario.REGRESSION_TARGET])
    assert reg.schema.field(scenario.REGRESSION_TARGET).type == pa.float64()
    assert reg[scenario.REGRESSION_TARGET].null_count == 0
    assert (y > 0).all() and y.std() > 20
    # Least squares on the numeric columns (numpy.linalg.lstsq) leaves a clear part unexplained:
    # the target has interactions and thresholds (the generator's contract).
    x = np.column_stack([_floats(reg[n]) for n in FLOATS + INTS] + [np.ones(ROWS)])
    x = np.where(np.isnan(x), np.nanmean(x, axis=0), x)
    coef, *_ = np.linalg.lstsq(x, y, rcond=None)
    r2 = 1 - np.var(y - x @ coef) / np.var(y)
    assert 0.3 < r2 < 0.75


def test_outcome_draw_matches_the_class_probabilities():
    # Law of large numbers (common practice, no source): class shares match the mean of the
    # generator's probabilities, and the oracle rule's error matches oracle_error, within 5 sd.
    sim = scenario._simulate(ROWS, 2026)
    p, y = sim["proba"], sim["outcome"]
    for k in range(3):
        sd = np.sqrt(p[:, k].mean() * (1 - p[:, k].mean()) / ROWS)
        assert abs(np.mean(y == k) - p[:, k].mean()) < 5 * sd
    floor = scenario.oracle_error(ROWS, 2026)
    wrong = np.mean(p.argmax(axis=1) != y)
    assert abs(wrong - floor) < 5 * np.sqrt(floor * (1 - floor) / ROWS)


def _softmax_fit_error(x, y, classes, steps=600, rate=0.5):
    """Training error of a multinomial logistic fit by plain gradient descent (numpy only)."""
    z = (x - x.mean(axis=0)) / x.std(axis=0)
    z = np.column_stack([z, np.ones(len(z))])
    target = np.eye(classes)[y]
    w = np.zeros((z.shape[1], classes))
    for _ in range(steps):
        logits = z @ w
        logits -= logits.max(axis=1, keepdims=True)
        prob = np.exp(logits)
        prob /= prob.sum(axis=1, keepdims=True)
        w -= rate * z.T @ (prob - target) / len(z)
    return np.mean((z @ w).argmax(axis=1) != y)


def test_error_floor_in_range_and_a_linear_rule_falls_well_short(table):
    # The contract: the floor is clearly above 0 (label noise), and the classes are not linearly
    # separable from the columns, so trees have something to find (common practice, no source).
    floor = scenario.oracle_error(ROWS, 2026)
    assert 0.06 < floor < 0.13
    cols = [_floats(table[n]) for n in FLOATS + INTS]
    cols += [np.isnan(_floats(table[n])).astype(float) for n in ("moisture_pct", "spread_c")]
    for name in STRINGS:
        values = np.asarray(table[name].fill_null("?").to_pylist())
        cols += [(values == level).astype(float) for level in np.unique(values)[1:]]  # one-hot
    cols.append(np.asarray(table["element_replaced"].to_pylist(), dtype=float))
    x = np.column_stack(cols)
    x = np.where(np.isnan(x), np.nanmean(x, axis=0), x)
    y = np.searchsorted(np.array(scenario.CLASSES), np.asarray(table[scenario.TARGET].to_pylist()))
    assert _softmax_fit_error(x, y, 3) > floor + 0.06


@pytest.mark.parametrize(
    "call",
    [
        lambda: scenario.generate(0),
        lambda: scenario.generate(2.5),
        lambda: scenario.generate(True),
        lambda: scenario.generate(10, seed=-1),
        lambda: scenario.generate_regression(-3),
        lambda: scenario.oracle_error(10, seed="x"),
    ],
)
def test_bad_rows_or_seed_raise_config_error(call):
    with pytest.raises(ConfigError, match="demo (rows|seed)"):
        call()


def test_write_refuses_unknown_extension(tmp_path):
    with pytest.raises(ConfigError, match="csv or .parquet"):
        scenario.write(tmp_path / "firings.xlsx")
    assert not (tmp_path / "firings.xlsx").exists()
    with pytest.raises(ConfigError, match="does not exist"):
        scenario.write(tmp_path / "no" / "firings.csv")
    (tmp_path / "taken.parquet").mkdir()  # a folder where the file should go
    with pytest.raises(ConfigError, match="cannot write demo file"):
        scenario.write(tmp_path / "taken.parquet")


def test_small_tables_work():
    # A handful of rows must still give a well-formed table (edge case of the contract).
    t = scenario.generate(1, 3)
    assert t.num_rows == 1 and t.num_columns == len(scenario.FEATURES) + 1
    assert t[scenario.TARGET][0].as_py() in scenario.CLASSES
