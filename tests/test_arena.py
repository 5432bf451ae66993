"""Kept trees packed as they arrive (baggr/arena.py) against the plain concatenation of the trees."""
import numpy as np
import psutil
import pyarrow as pa
import pytest

import baggr
from baggr.model import arena
from baggr.engine import Training
from baggr.model.forest import NODE_FIELDS


def _table(n=400, seed=5):
    """Numeric and categorical features, three classes (invented data)."""
    rng = np.random.default_rng(seed)
    x = rng.standard_normal((n, 3))
    level = rng.choice(["dry", "damp", "wet", "flooded"], n)
    y = np.where(x[:, 0] + (level == "wet") > 0.5, "high", np.where(x[:, 1] > 0, "mid", "low"))
    return pa.table({"x0": x[:, 0], "x1": x[:, 1], "x2": x[:, 2], "ground": level}), y


def _reference(tr, members):
    """Each member grown again on its own (a pure function of m), concatenated with numpy."""
    trees = [tr.grower.grow_member(m).tree for m in range(members)]
    ref = {name: np.concatenate([getattr(t, name) for t in trees]) for name in NODE_FIELDS}
    ref["cat_masks"] = np.concatenate([t.cat_masks.reshape(-1, 4) for t in trees])
    ref["node_offset"] = np.cumsum([0] + [len(t.left) for t in trees])
    ref["mask_offset"] = np.cumsum([0] + [len(t.cat_masks) for t in trees])
    return ref


def _assert_forest(forest, ref):
    assert set(forest.arrays) == set(ref)
    for name, want in ref.items():
        np.testing.assert_array_equal(forest.arrays[name], want, err_msg=name)


@pytest.mark.parametrize("threads", [1, 2])
def test_the_ensemble_holds_every_member_tree_in_order(threads):
    X, y = _table()
    tr = Training(X, y, baggr.Config(members=6, seed=3, threads=threads))
    ens = tr.run()
    assert tr._arena is not None  # the arena path is the one under test
    assert ens.forest.arrays["cat_masks"].shape[0] > 0  # the categorical feature was split on
    _assert_forest(ens.forest, _reference(tr, 6))


def test_without_the_arena_the_trees_are_packed_the_same(monkeypatch):
    X, y = _table()
    monkeypatch.setattr(arena, "_reserve", lambda shape, dtype: None)
    tr = Training(X, y, baggr.Config(members=6, seed=3, threads=2))
    ens = tr.run()
    assert tr._arena is None
    _assert_forest(ens.forest, _reference(tr, 6))


def test_a_full_arena_hands_over_to_packing(monkeypatch):
    X, y = _table()
    small = arena.Arena.reserve
    # room for about two trees: the third does not fit and the run packs at the end instead
    monkeypatch.setattr(arena.Arena, "reserve", classmethod(lambda cls, nodes, masks, n_out: small(120, 60, n_out)))
    tr = Training(X, y, baggr.Config(members=6, seed=3, threads=1))
    ens = tr.run()
    assert tr._arena is None
    _assert_forest(ens.forest, _reference(tr, 6))


def test_an_ensemble_taken_earlier_does_not_change_as_the_run_goes_on():
    X, y = _table()
    tr = Training(X, y, baggr.Config(members=6, seed=3, threads=2))
    first = tr.run(until=3)
    before = {k: v.copy() for k, v in first.forest.arrays.items()}
    last = tr.run()
    for k, v in before.items():
        np.testing.assert_array_equal(first.forest.arrays[k], v)
    n3 = before["node_offset"][-1]
    np.testing.assert_array_equal(last.forest.arrays["left"][:n3], before["left"])
    np.testing.assert_array_equal(first.vote_shares(X), baggr.train(X, y, baggr.Config(members=3, seed=3)).vote_shares(X))


def test_reserving_room_for_a_billion_nodes_takes_no_resident_memory():
    # Linux mmap(2) with MAP_NORESERVE: pages are allocated when first written (the manual page)
    proc = psutil.Process()
    before = proc.memory_info().rss
    a = arena.Arena.reserve(10**9, 10**8, 3)
    if a is None:
        pytest.skip("this system does not reserve address space without committing it")
    assert proc.memory_info().rss - before < 16 * 2**20
    assert a._a["value"].shape == (10**9, 3)
