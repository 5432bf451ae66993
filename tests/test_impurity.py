"""Impurities and root splits against textbook figures worked by hand."""
import numpy as np
import pytest

from baggr.learn.rng import STREAM_TREE, stream_state
from baggr.learn.split_kernels import ENTROPY, GINI, impurity_counts
from baggr.learn.tree import grow

# Mitchell, Machine Learning (1997), ch. 3, Table 3.2: 14 days, PlayTennis 9 yes / 5 no.
DAYS = [
    ("Sunny", "Hot", "High", "Weak", "No"),
    ("Sunny", "Hot", "High", "Strong", "No"),
    ("Overcast", "Hot", "High", "Weak", "Yes"),
    ("Rain", "Mild", "High", "Weak", "Yes"),
    ("Rain", "Cool", "Normal", "Weak", "Yes"),
    ("Rain", "Cool", "Normal", "Strong", "No"),
    ("Overcast", "Cool", "Normal", "Strong", "Yes"),
    ("Sunny", "Mild", "High", "Weak", "No"),
    ("Sunny", "Cool", "Normal", "Weak", "Yes"),
    ("Rain", "Mild", "Normal", "Weak", "Yes"),
    ("Sunny", "Mild", "Normal", "Strong", "Yes"),
    ("Overcast", "Mild", "High", "Strong", "Yes"),
    ("Overcast", "Hot", "Normal", "Weak", "Yes"),
    ("Rain", "Mild", "High", "Strong", "No"),
]
ATTRS = ["Outlook", "Temperature", "Humidity", "Wind"]
YES = np.array([d[4] == "Yes" for d in DAYS], dtype=np.int64)


def _counts(mask):
    return np.array([np.sum(mask & (YES == 0)), np.sum(mask & (YES == 1))], np.int64)


def _entropy(mask):
    return impurity_counts(_counts(mask), ENTROPY)


def _gain(attr):
    """Information gain of a multiway split on one attribute, from the kernel's entropy."""
    col = np.array([d[ATTRS.index(attr)] for d in DAYS])
    everyone = np.ones(len(DAYS), bool)
    return _entropy(everyone) - sum((col == v).sum() / len(DAYS) * _entropy(col == v) for v in np.unique(col))


def test_parent_entropy_and_gini():
    everyone = np.ones(len(DAYS), bool)
    assert _entropy(everyone) == pytest.approx(0.940, abs=5e-4)  # Mitchell 1997, ch. 3: Entropy(S) = 0.940
    # 1 - (9/14)^2 - (5/14)^2 = 90/196, by hand from the Gini definition (Breiman et al. 1984, ch. 4)
    assert impurity_counts(_counts(everyone), GINI) == pytest.approx(0.459, abs=5e-4)


@pytest.mark.parametrize("attr,gain", [("Outlook", 0.246), ("Humidity", 0.151), ("Wind", 0.048),
                                       ("Temperature", 0.029)])
def test_information_gain(attr, gain):
    # Mitchell 1997, ch. 3 prints Gain(S, Humidity) = .151 (exactly 0.1518), Wind .048, Outlook .246,
    # Temperature .029
    assert _gain(attr) == pytest.approx(gain, abs=1.5e-3)


def test_root_split_is_outlook():
    attrs = ["Outlook", "Humidity", "Wind"]
    levels = {a: sorted({d[ATTRS.index(a)] for d in DAYS}) for a in attrs}
    codes = np.array([[levels[a].index(d[ATTRS.index(a)]) for d in DAYS] for a in attrs], np.uint8)
    n_bins = np.array([len(levels[a]) for a in attrs], np.int32)
    tree = grow(codes, n_bins, np.ones(3, np.uint8), YES.astype(np.int32), np.zeros(1), np.ones(14, np.int32),
                task="classes", n_classes=2, criterion="entropy", features_per_split=3, min_leaf=1,
                depth_limit=1, rng_state=stream_state(0, 0, STREAM_TREE))
    # Mitchell 1997, ch. 3: Outlook has the highest gain and is the root. As a binary split its best
    # cut is {Overcast} vs {Sunny, Rain}: gain 0.940 - 10/14 * 1.0 = 0.226 > Humidity's 0.151 (by hand).
    assert attrs[tree.feature[0]] == "Outlook"
    mask = int(tree.cat_masks[tree.threshold[0], 0])
    left = {lv for i, lv in enumerate(levels["Outlook"]) if mask >> i & 1}
    assert left in ({"Overcast"}, {"Sunny", "Rain"})
    w = tree.weight.astype(float)
    gain = tree.impurity[0] - (w[1] * tree.impurity[1] + w[2] * tree.impurity[2]) / w[0]
    assert gain == pytest.approx(0.940 - 10 / 14, abs=1e-3)  # by hand, as above


def test_regression_split_by_hand():
    y = np.array([1.0, 2.0, 3.0, 10.0, 11.0, 12.0])
    codes = np.arange(6, dtype=np.uint8)[None, :]
    tree = grow(codes, np.array([6], np.int32), np.zeros(1, np.uint8), np.zeros(1, np.int32), y,
                np.ones(6, np.int32), task="regression", n_classes=1, criterion="variance", features_per_split=1,
                min_leaf=1, depth_limit=1, rng_state=stream_state(0, 0, STREAM_TREE))
    # by hand: mean 6.5, population variance (2 * (5.5^2 + 4.5^2 + 3.5^2)) / 6 = 20.9167
    assert tree.impurity[0] == pytest.approx(20.9167, abs=1e-4)
    assert tree.threshold[0] == 2  # split after the third value: {1, 2, 3} | {10, 11, 12}
    # by hand: each child has variance 2/3, so the weighted child variance is 0.6667
    w = tree.weight.astype(float)
    assert (w[1] * tree.impurity[1] + w[2] * tree.impurity[2]) / w[0] == pytest.approx(0.6667, abs=1e-4)
    np.testing.assert_allclose(tree.value[1:, 0], [2.0, 11.0])  # child means, by hand
