"""An invented kiln-firing scenario: a deterministic table generator for `baggr demo` and for trying baggr.

Every name, number and rule here is made up. Each row is one firing of one of twelve
electric kilns; the classification target is the outcome of the batch, the regression
target the minutes until the kiln could be unloaded. Only numpy and pyarrow are imported
so the package stays cheap to load.
"""

from pathlib import Path

import numpy as np
import pyarrow as pa

TARGET = "outcome"
REGRESSION_TARGET = "cooldown_min"
CLASSES = ("pass", "rework", "scrap")
RARE_CLASS = "scrap"

DESCRIPTION = (
    "Firing logs from twelve electric kilns at an invented ceramics works: each row is one "
    "firing, with the kiln, glaze, setter and load, what the controller and sensors recorded, "
    "and the outcome of the batch (pass, rework, or the rare scrap). "
    "The thermocouple-spread probe tends to burn out when a kiln overfires, so its gaps are "
    "themselves a warning sign."
)

# Kiln K01..K12: how often each is fired, how hot its controller runs, and its capacity (kg).
KILNS = tuple(f"K{i:02d}" for i in range(1, 13))
_KILN_WEIGHT = np.array([14, 12, 11, 10, 9, 8, 8, 7, 6, 6, 5, 4], dtype=np.float64)
_KILN_OFFSET = np.array([0, -2, 3, 8, -1, 1, -4, 2, 12, 0, 5, -3], dtype=np.float64)
_KILN_CAPACITY = np.array([220, 220, 180, 180, 260, 260, 140, 140, 200, 300, 120, 160], dtype=np.float64)

# Glaze families and the peak temperature (deg C) each is meant to reach.
GLAZES = ("matte", "gloss", "satin", "crackle", "bare")
_GLAZE_WEIGHT = np.array([0.30, 0.25, 0.20, 0.10, 0.15])
_GLAZE_TARGET = np.array([1165.0, 1185.0, 1175.0, 1150.0, 1195.0])

# Kiln furniture the ware sits on; racks let air through, saggers hold heat.
SETTERS = ("shelf", "sagger", "rack", "post")
_SETTER_WEIGHT = np.array([0.45, 0.20, 0.25, 0.10])
_SETTER_SPREAD = np.array([0.0, 2.5, -2.0, 1.0])
_SETTER_COOL = np.array([0.0, 25.0, -12.0, 5.0])

# Shares of values left out: moisture is skipped at random, the setter is sometimes not logged.
_MOISTURE_MISSING = 0.08
_SETTER_MISSING = 0.06
# The spread probe drops out now and then, far more often when the kiln overfires or is worn.
_SPREAD_MISSING_BASE = 0.05
_SPREAD_MISSING_HOT = 0.55
_SPREAD_MISSING_WORN = 0.10
# Fan vibration readings that are glitches (finite, 6-20 times the true value).
_GLITCH_SHARE = 0.004

# Column order of the feature part of every table.
FEATURES = (
    "kiln",
    "glaze",
    "setter",
    "element_replaced",
    "firings_since_service",
    "peak_temp_c",
    "ramp_c_per_min",
    "hold_min",
    "load_kg",
    "moisture_pct",
    "spread_c",
    "fan_vibration_mm_s",
    "door_openings",
)


def _step(x, edge, width):
    """Smooth step from 0 to 1 around edge; thresholds a tree can find, softened by width."""
    # Clipped so far tails of long-tailed columns cannot overflow exp.
    return 1.0 / (1.0 + np.exp(np.clip((edge - x) / width, -60.0, 60.0)))


def _simulate(rows, seed):
    """Draw every latent and recorded quantity of `rows` firings from one seeded Generator."""
    rng = np.random.default_rng(seed)
    n = rows

    kiln = rng.choice(len(KILNS), size=n, p=_KILN_WEIGHT / _KILN_WEIGHT.sum())
    glaze = rng.choice(len(GLAZES), size=n, p=_GLAZE_WEIGHT)
    setter = rng.choice(len(SETTERS), size=n, p=_SETTER_WEIGHT)
    replaced = rng.random(n) < 0.12
    # Service intervals are long-tailed: most kilns are serviced often, a few are neglected.
    age = np.floor(np.exp(rng.normal(3.7, 0.75, n))).astype(np.int64)

    # Fresh heating elements overshoot; worn kilns wander more.
    drift = rng.random(n) < 0.025
    peak = (
        _GLAZE_TARGET[glaze]
        + _KILN_OFFSET[kiln]
        + 7.0 * replaced
        + rng.normal(0.0, 1.0, n) * (6.0 + 0.05 * np.minimum(age, 300))
        + drift * rng.normal(26.0, 6.0, n)
    )
    dev = peak - _GLAZE_TARGET[glaze]
    ramp = np.clip(rng.normal(4.5, 1.2, n), 1.5, 9.0)
    hold = 10.0 + rng.gamma(2.0, 10.0, n)
    fill = rng.beta(5.0, 2.0, n)
    load = _KILN_CAPACITY[kiln] * fill
    moisture = rng.gamma(4.0, 0.6, n)
    spread = (
        5.0
        + 0.04 * np.minimum(age, 300)
        + 6.0 * np.maximum(fill - 0.8, 0.0) / 0.2
        + _SETTER_SPREAD[setter]
        - 1.5 * replaced
        + np.abs(rng.normal(0.0, 3.0, n))
    )
    spread = np.maximum(spread, 0.5)
    vibration = np.exp(rng.normal(np.log(2.0), 0.45, n))
    doors = rng.poisson(0.6, n)

    # Outcome: logits of rework and scrap against pass, built from thresholds and interactions.
    overfire = _step(dev, 22.0, 1.5)
    blowout = _step(moisture, 3.6, 0.15) * _step(ramp, 5.5, 0.15)
    scrap_logit = -5.6 + 8.4 * overfire + 7.6 * blowout
    rework_logit = (
        -3.6
        + 5.8 * _step(-dev, 15.0, 1.0)
        + 5.6 * _step(dev, 16.0, 1.0) * (1.0 - overfire)
        + 5.4 * _step(spread, 16.5, 0.5)
        + 5.6 * np.isin(glaze, (1, 2)) * (doors >= 2)
        + 5.4 * (glaze == 3) * _step(age, 110.0, 5.0)
        + 5.6 * _step(-hold, -15.0, 0.7) * _step(fill, 0.85, 0.015)
        + 3.0 * _step(vibration, 4.2, 0.15)
    )
    logits = np.stack([np.zeros(n), rework_logit, scrap_logit], axis=1)
    logits -= logits.max(axis=1, keepdims=True)
    proba = np.exp(logits)
    proba /= proba.sum(axis=1, keepdims=True)
    # Inverse-CDF draw: one uniform per row keeps the stream layout fixed.
    u = rng.random(n)
    outcome = (u[:, None] > np.cumsum(proba, axis=1)[:, :2]).sum(axis=1)

    # Cooldown: hotter, heavier, longer-held loads cool slower; a failing fan (true vibration
    # high) and saggers slow it further, and the effect of load depends on the setter.
    failing_fan = _step(vibration, 3.4, 0.15)
    cooldown = (
        60.0
        + 1.1 * (peak - 1100.0)
        + 0.35 * load * (1.0 + 0.6 * (setter == 1))
        + 0.8 * hold
        + _SETTER_COOL[setter]
        + 70.0 * failing_fan * fill
        + 0.6 * spread**1.5
    ) * np.exp(rng.normal(0.0, 0.06, n))

    # What the log shows: glitches in the vibration reading and gaps in three columns.
    glitch = rng.random(n) < _GLITCH_SHARE
    vibration_seen = np.where(glitch, vibration * rng.uniform(6.0, 20.0, n), vibration)
    moisture_gap = rng.random(n) < _MOISTURE_MISSING
    setter_gap = rng.random(n) < _SETTER_MISSING
    spread_gap = rng.random(n) < (
        _SPREAD_MISSING_BASE + _SPREAD_MISSING_HOT * _step(dev, 18.0, 2.0) + _SPREAD_MISSING_WORN * (age > 150)
    )

    return {
        "kiln": kiln,
        "glaze": glaze,
        "setter": setter,
        "setter_gap": setter_gap,
        "element_replaced": replaced,
        "firings_since_service": age,
        "peak_temp_c": np.round(peak, 1),
        "ramp_c_per_min": np.round(ramp, 2),
        "hold_min": np.round(hold, 1),
        "load_kg": np.round(load, 1),
        "moisture_pct": np.round(moisture, 2),
        "moisture_gap": moisture_gap,
        "spread_c": np.round(spread, 1),
        "spread_gap": spread_gap,
        "fan_vibration_mm_s": np.round(vibration_seen, 2),
        "door_openings": doors.astype(np.int64),
        "proba": proba,
        "outcome": outcome,
        "cooldown_min": np.round(cooldown, 1),
    }


def _fail(message):
    """Raise the project's settings error; imported late so `demo` loads without baggr's engine."""
    from baggr.errors import ConfigError

    raise ConfigError(message)


def _check(rows, seed):
    """Reject row counts and seeds the generator cannot use."""
    if isinstance(rows, bool) or not isinstance(rows, (int, np.integer)) or rows < 1:
        _fail(f"demo rows must be a positive whole number, got {rows!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        _fail(f"demo seed must be a non-negative whole number, got {seed!r}")
    return int(rows), int(seed)


def _strings(levels, codes, gap=None):
    """A string column from level codes, null where `gap` is set."""
    return pa.array(levels, type=pa.string()).take(pa.array(codes, type=pa.int64(), mask=gap))


def _features(sim):
    """The recorded feature columns, in FEATURES order, as pyarrow arrays."""
    return {
        "kiln": _strings(KILNS, sim["kiln"]),
        "glaze": _strings(GLAZES, sim["glaze"]),
        "setter": _strings(SETTERS, sim["setter"], sim["setter_gap"]),
        "element_replaced": pa.array(sim["element_replaced"], type=pa.bool_()),
        "firings_since_service": pa.array(sim["firings_since_service"], type=pa.int64()),
        "peak_temp_c": pa.array(sim["peak_temp_c"], type=pa.float64()),
        "ramp_c_per_min": pa.array(sim["ramp_c_per_min"], type=pa.float64()),
        "hold_min": pa.array(sim["hold_min"], type=pa.float64()),
        "load_kg": pa.array(sim["load_kg"], type=pa.float64()),
        "moisture_pct": pa.array(sim["moisture_pct"], type=pa.float64(), mask=sim["moisture_gap"]),
        "spread_c": pa.array(sim["spread_c"], type=pa.float64(), mask=sim["spread_gap"]),
        "fan_vibration_mm_s": pa.array(sim["fan_vibration_mm_s"], type=pa.float64()),
        "door_openings": pa.array(sim["door_openings"], type=pa.int64()),
    }


def generate(rows: int = 6000, seed: int = 2026) -> pa.Table:
    """Firing logs with the string column `outcome` (pass / rework / rare scrap) as the last column."""
    rows, seed = _check(rows, seed)
    sim = _simulate(rows, seed)
    columns = _features(sim)
    columns[TARGET] = _strings(CLASSES, sim["outcome"])
    return pa.table(columns)


def generate_regression(rows: int = 6000, seed: int = 2026) -> pa.Table:
    """The same firings as `generate(rows, seed)` with the float column `cooldown_min` as the target."""
    rows, seed = _check(rows, seed)
    sim = _simulate(rows, seed)
    columns = _features(sim)
    columns[REGRESSION_TARGET] = pa.array(sim["cooldown_min"], type=pa.float64())
    return pa.table(columns)


def oracle_error(rows: int = 6000, seed: int = 2026) -> float:
    """Error of the rule that knows each row's true class probabilities: a floor no model can beat.

    It sees the hidden values behind the gaps and rounding too, so the best error reachable
    from the recorded columns is somewhat higher.
    """
    rows, seed = _check(rows, seed)
    proba = _simulate(rows, seed)["proba"]
    return float(np.mean(1.0 - proba.max(axis=1)))


def write(path, rows: int = 6000, seed: int = 2026, regression: bool = False) -> Path:
    """Write the demo table to a .csv or .parquet file (chosen by extension) and return its path."""
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix not in (".csv", ".parquet"):
        _fail(f"demo output must end in .csv or .parquet, got {path.name!r}")
    table = generate_regression(rows, seed) if regression else generate(rows, seed)
    if not path.parent.is_dir():
        _fail(f"cannot write demo file {str(path)!r}: folder {str(path.parent)!r} does not exist")
    try:
        if suffix == ".csv":
            from pyarrow import csv

            csv.write_csv(table, path)
        else:
            from pyarrow import parquet

            parquet.write_table(table, path)
    except OSError as exc:  # pyarrow's own errors for unwritable paths derive from OSError
        _fail(f"cannot write demo file {str(path)!r}: {exc}")
    return path
