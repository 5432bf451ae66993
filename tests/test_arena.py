"""Kept trees packed into the compact layout as they arrive (baggr/model/arena.py) against each
member grown again on its own and packed with the plain concatenation of its node arrays."""
import numpy as np
import psutil
import pyarrow as pa
import pytest

import baggr
from baggr.engine import Training
from baggr.model import arena
from baggr.model.compact import Compact, Stack
from baggr.model.forest import Forest


def _table(n=400, seed=5):
    """Numeric and categorical features, three classes (invented data)."""
    rng = np.random.default_rng(seed)
    x = rng.standard_normal((n, 3))
    level = rng.choice(["dry", "damp", "wet", "flooded"], n)
    y = np.where(x[:, 0] + (level == "wet") > 0.5, "high", np.where(x[:, 1] > 0, "mid", "low"))
    return pa.table({"x0": x[:, 0], "x1": x[:, 1], "x2": x[:, 2], "ground": level}), y


def _reference(tr, members) -> Compact:
    """Each member grown again on its own (a pure function of m), its node arrays concatenated with
    numpy (Forest.pack) and packed in one go."""
    trees = [tr.grower.grow_member(m).tree for m in range(members)]
    return Compact.from_forest(Forest.pack(trees, tr.n_out), tr.kind)


def _assert_same(got, want: Compact):
    assert got.members == want.members and got.kind == want.kind
    for name, w in want.arrays.items():
        np.testing.assert_array_equal(got.arrays[name], w, err_msg=name)


@pytest.mark.parametrize("threads", [1, 2])
@pytest.mark.parametrize("vote", ["hard", "shares"])
def test_the_ensemble_holds_every_member_tree_in_order(threads, vote):
    X, y = _table()
    tr = Training(X, y, baggr.Config(members=6, seed=3, threads=threads, vote=vote, min_leaf=4))
    ens = tr.run()
    assert ens.forest.has_cat   # the categorical feature was split on
    if vote == "shares":
        assert ens.forest.arrays["shares"].shape[0] > 0   # mixed leaves: share rows to number
    _assert_same(ens.forest, _reference(tr, 6))


def test_an_arena_that_fills_moves_to_a_larger_home(monkeypatch):
    X, y = _table()
    real, calls = arena._reserve, []

    def small_first(count, dtype, width=0):   # room for about two trees at first: a later one moves it
        calls.append(count)
        return real(min(count, 150) if len(calls) <= 3 else count, dtype, width)
    monkeypatch.setattr(arena, "_reserve", small_first)
    tr = Training(X, y, baggr.Config(members=6, seed=3, threads=1, vote="shares", min_leaf=4))
    first = tr.run(until=2)
    kept_first = {k: v.copy() for k, v in first.forest.arrays.items()}
    ens = tr.run()
    _assert_same(ens.forest, _reference(tr, 6))
    assert tr._arena._nodes.shape[0] > 150     # the arrays did move
    for k, v in kept_first.items():     # the earlier views stay valid after the move
        np.testing.assert_array_equal(first.forest.arrays[k], v)


def test_slices_and_parts_put_together_again_give_the_same_trees():
    X, y = _table()
    tr = Training(X, y, baggr.Config(members=7, seed=3, threads=2, vote="shares", min_leaf=4))
    ens = tr.run()
    parts = [tr.kept(0, 2), tr.kept(2, 3), tr.kept(3, 7)]
    assert [p.members for p in parts] == [2, 1, 4]
    for p in parts[1:]:       # a slice's share rows count from its own first
        assert p.arrays["leaves"].max() < max(1, p.arrays["shares"].shape[0])
    again = arena.Arena(tr.kind, tr.n_out, 7, 400, True)
    again.extend(Stack(parts))
    _assert_same(again.compact(), ens.forest)
    np.testing.assert_array_equal(Stack(parts).head(5).to_forest().arrays["left"],
                                  ens.forest.head(5).to_forest().arrays["left"])


def test_an_ensemble_taken_earlier_does_not_change_as_the_run_goes_on():
    X, y = _table()
    tr = Training(X, y, baggr.Config(members=6, seed=3, threads=2))
    first = tr.run(until=3)
    before = {k: v.copy() for k, v in first.forest.arrays.items()}
    last = tr.run()
    for k, v in before.items():
        np.testing.assert_array_equal(first.forest.arrays[k], v)
    n3 = before["offset"][-1]
    np.testing.assert_array_equal(last.forest.arrays["nodes"][:n3], before["nodes"])
    np.testing.assert_array_equal(first.vote_shares(X), baggr.train(X, y, baggr.Config(members=3, seed=3)).vote_shares(X))


def test_reserving_room_for_a_billion_nodes_takes_no_resident_memory():
    # Linux mmap(2) with MAP_NORESERVE: pages are allocated when first written (the manual page)
    if not arena._NORESERVE:
        pytest.skip("this system does not reserve address space without committing it")
    proc = psutil.Process()
    before = proc.memory_info().rss
    a = arena.Arena("shares", 3, 1000, 10**6, False)
    assert proc.memory_info().rss - before < 16 * 2**20
    assert a._nodes.shape[0] >= 10**9 and a._shares.shape == (10**9, 3)
