"""Bad input to train and predict: a BaggrError naming the problem, or a documented sensible behaviour."""
import numpy as np
import pyarrow as pa
import pytest

import baggr
from generators import twonorm


def _cfg(**kw):
    return baggr.Config(members=kw.pop("members", 5), seed=1, **kw)


def test_empty_table():
    with pytest.raises(baggr.BaggrError, match="row"):
        baggr.train(np.zeros((0, 3)), np.zeros(0, int), _cfg())


def test_one_row():
    with pytest.raises(baggr.BaggrError, match="row"):
        baggr.train(np.zeros((1, 3)), np.array([1, 2])[:1], _cfg())


def test_one_class():
    with pytest.raises(baggr.BaggrError, match="class"):
        baggr.train(np.random.default_rng(0).normal(size=(50, 3)), np.ones(50, int), _cfg())


def test_nan_in_target_refused_when_asked_and_otherwise_left_out_with_a_warning():
    y = np.random.default_rng(0).normal(size=50)
    y[7] = np.nan
    X = np.random.default_rng(1).normal(size=(50, 3))
    with pytest.raises(baggr.BaggrError, match="1 missing values"):
        baggr.train(X, y, _cfg(), missing_target="refuse")
    with pytest.warns(UserWarning, match="left out 1 of 50 rows whose target is missing"):
        ens = baggr.train(X, y, _cfg())
    # the OOB figures cover the 49 rows with a target, no more (common practice, no source)
    assert ens.oob.left_out.shape == (49,) and ens.stats["missing_target"] == 1


def test_rows_and_target_lengths_differ():
    with pytest.raises(baggr.BaggrError):
        baggr.train(np.zeros((10, 2)), np.arange(9) % 2, _cfg())


def test_all_missing_and_constant_features_are_never_split_on():
    # Documented behaviour: a feature with no values or one value cannot split; the rest still learn.
    X, y = twonorm(400, seed=2)
    X = np.column_stack([np.full(400, np.nan), np.full(400, 3.0), X])
    ens = baggr.train(X, y, _cfg(members=10))
    used = ens.forest.to_forest().arrays["feature"]
    assert not np.any(np.isin(used, [0, 1]))
    assert ens.oob.error < 0.2


def test_infinite_values_go_to_the_end_bins():
    # Documented behaviour: +inf sorts above every finite value, -inf below (IEEE 754 order).
    rng = np.random.default_rng(3)
    x = rng.normal(size=300)
    y = (x > 0).astype(int)
    x[:5] = np.inf * np.where(y[:5] == 1, 1, -1)
    ens = baggr.train(x[:, None], y, _cfg(members=10, features_per_split=1))
    assert list(ens.predict(np.array([[np.inf], [-np.inf]]))) == [1, 0]


def test_infinite_target_is_refused():
    y = np.random.default_rng(0).normal(size=50)
    y[3] = np.inf
    with pytest.raises(baggr.BaggrError, match="inf"):
        baggr.train(np.random.default_rng(1).normal(size=(50, 2)), y, _cfg())


def test_identifier_like_text_column_is_refused_and_many_levels_are_pooled():
    n = 600
    rng = np.random.default_rng(4)
    y = rng.integers(0, 2, n)
    ids = pa.table({"id": [f"row-{i}" for i in range(n)], "x": rng.normal(size=n)})
    with pytest.raises(baggr.BaggrError, match="id"):
        baggr.train(ids, y, _cfg())
    levels = pa.table({"site": [f"s{i % 300}" for i in range(3000)], "x": rng.normal(size=3000)})
    ens = baggr.train(levels, rng.integers(0, 2, 3000), _cfg())
    assert len(ens.schema.levels[0]) == 255 and "(other)" in ens.schema.levels[0]


def test_predict_with_missing_or_mistyped_columns():
    rng = np.random.default_rng(5)
    t = pa.table({"a": rng.normal(size=200), "b": rng.normal(size=200), "c": [("u", "v")[i % 2] for i in range(200)]})
    y = rng.integers(0, 2, 200)
    ens = baggr.train(t, y, _cfg())
    with pytest.raises(baggr.BaggrError, match="b"):
        ens.predict(t.drop_columns(["b"]))
    with pytest.raises(baggr.BaggrError, match="c"):
        ens.predict(t.set_column(2, "c", pa.array(rng.normal(size=200))))
    with pytest.raises(baggr.BaggrError):
        ens.predict(np.zeros((3, 5)))
    # Extra columns are ignored; an unseen level is treated as missing.
    extra = t.append_column("z", pa.array(np.zeros(200)))
    assert list(ens.predict(extra)) == list(ens.predict(t))
    unseen = t.set_column(2, "c", pa.array(["w"] * 200))
    assert len(ens.predict(unseen)) == 200


def test_bad_settings():
    X, y = twonorm(50, seed=6)
    with pytest.raises(baggr.ConfigError, match="members"):
        baggr.Config(members=0)
    with pytest.raises(baggr.ConfigError, match="features_per_split"):
        baggr.train(X, y, baggr.Config(members=2, features_per_split=21))
    with pytest.raises(baggr.ConfigError, match="variance"):
        baggr.train(X, y, baggr.Config(members=2, criterion="variance"))
    with pytest.raises(baggr.ConfigError):
        baggr.Config(draw="jackknife")
