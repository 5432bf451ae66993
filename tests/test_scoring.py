"""The compact scorer gives, bit for bit, what the scorer of format version 1 gave (tests/reference_scoring.py,
the code of 909f52b), for any thread count, block size and span of rows, on both walking paths (rows
with missing codes or categorical splits, and rows and forests without)."""
import numpy as np
import pytest

import baggr
from baggr import data
from baggr.model.compact import KINDS, Compact
from baggr.model.predict_kernels import score_compact
from baggr.model.scoring import score
from generators import friedman1, waveform
from reference_scoring import score_rows

KINDS_LEVELS = np.array(["clay", "stone", "porcelain", "glass", "ash"])


def _table(n, seed, task, categorical):
    if task == "classes":
        X, y = waveform(n, seed)
        y = np.array(["low", "mid", "high"])[y]
    else:
        X, y = friedman1(n, seed)
    rng = np.random.default_rng(seed)
    cols = {f"x{j}": X[:, j].copy() for j in range(6)}
    # missing values in the second half only: blocks of the first half take the plain path
    for j in (1, 4):
        cols[f"x{j}"][(rng.random(n) < 0.15) & (np.arange(n) >= n // 2)] = np.nan
    if categorical:
        cols["kind"] = KINDS_LEVELS[rng.integers(0, 5, n)]
    return cols, y


def _reference(ens, codes):
    # the learner's node arrays as grown (kept by the fixture), else unpacked from the records
    a = ens.wide.arrays if hasattr(ens, "wide") else ens.forest.to_forest().arrays
    hard = ens.task == "classes" and ens.config.vote == "hard"
    sums, votes = score_rows(codes, 0, codes.shape[1], a["left"], a["right"], a["feature"], a["threshold"], a["is_cat"],
                             a["missing_left"], a["cat_masks"], a["value"], a["node_offset"], a["mask_offset"], hard)
    return votes.astype(np.float64) if hard else sums


CASES = [("classes", "hard", True), ("classes", "shares", True), ("regression", "hard", True),
         ("classes", "hard", False), ("regression", "hard", False), ("classes", "shares", False)]


@pytest.fixture(scope="module", params=CASES, ids=["-".join(map(str, c)) for c in CASES])
def model(request):
    task, vote, categorical = request.param
    X, y = _table(1500, 3, task, categorical)
    cfg = baggr.Config(members=7, seed=5, threads=1, vote=vote, min_leaf=2 if vote == "shares" else 1,
                       depth_limit=None if task == "classes" else 9)
    from baggr.engine import Training
    from baggr.model.forest import Forest
    tr = Training(X, y, cfg)
    ens = tr.run()
    # each member grown again on its own (a pure function of m): the learner's own node arrays
    ens.wide = Forest.pack([tr.grower.grow_member(m).tree for m in range(cfg.members)], tr.n_out)
    new, _ = _table(9000, 4, task, categorical)
    codes = data.encode(new, ens.schema, ens.binning)
    return ens, codes, _reference(ens, codes)


@pytest.mark.parametrize("threads", [1, 2, 3])
def test_bit_identical_to_the_version_1_scorer(model, threads):
    ens, codes, want = model
    got = score(codes, ens.compact, threads=threads)
    assert got.dtype == want.dtype and got.shape == want.shape
    np.testing.assert_array_equal(got, want)


@pytest.mark.parametrize("block,lo,hi", [(8, 0, 9000), (64, 13, 8999), (1000, 4500, 4507), (256, 3, 4)])
def test_any_block_and_span(model, block, lo, hi):
    ens, codes, want = model
    c = ens.compact
    a, kind = c.arrays, KINDS[c.kind]
    votes = np.zeros((hi - lo if kind == 0 else 0, c.n_out), np.int32)
    sums = np.zeros((0 if kind == 0 else hi - lo, c.n_out))
    score_compact(codes, lo, hi, block, a["nodes"], a["offset"], a["leaf_offset"], a["leaves"], a["shares"], kind,
                  c.has_cat, sums, votes)
    np.testing.assert_array_equal(votes.astype(np.float64) if kind == 0 else sums, want[lo:hi])


def test_the_general_path_alone_agrees(model):
    # has_cat=True sends every block down the general step, whatever its rows
    ens, codes, want = model
    c = ens.compact
    a, kind = c.arrays, KINDS[c.kind]
    votes = np.zeros((codes.shape[1] if kind == 0 else 0, c.n_out), np.int32)
    sums = np.zeros((0 if kind == 0 else codes.shape[1], c.n_out))
    score_compact(codes, 0, codes.shape[1], 512, a["nodes"], a["offset"], a["leaf_offset"], a["leaves"],
                  a["shares"], kind, True, sums, votes)
    np.testing.assert_array_equal(votes.astype(np.float64) if kind == 0 else sums, want)


def test_save_and_load_keep_the_bits(model, tmp_path):
    ens, codes, want = model
    ens.save(tmp_path / "m.npz")
    back = baggr.load(tmp_path / "m.npz")
    assert isinstance(back.forest, Compact)
    np.testing.assert_array_equal(score(codes, back.compact, threads=2), want)


def test_compact_counts_every_node(model):
    ens = model[0]
    c = ens.compact
    wide = ens.wide.arrays     # the learner's node arrays the records came from
    n_nodes = wide["left"].shape[0]
    n_sets = wide["cat_masks"].shape[0]
    assert c.n_nodes == n_nodes and c.has_cat == (n_sets > 0)
    assert c.arrays["nodes"].shape[0] == n_nodes + 4 * n_sets  # one slot a node, 4 a level set
    assert c.arrays["leaves"].shape[0] == int(np.sum(wide["left"] < 0))
    fresh = type(c)(c.arrays, c.kind, c.n_out)  # counted from the records alone, as after a load
    assert fresh.n_nodes == n_nodes and fresh.has_cat == c.has_cat


@pytest.mark.parametrize("vote", ["hard", "shares"])
def test_trees_that_are_one_leaf(vote):
    # min_leaf above half the rows: no split is allowed, every member is its root
    X, y = _table(600, 8, "classes", True)
    ens = baggr.train(X, y, baggr.Config(members=5, seed=1, threads=1, vote=vote, min_leaf=400))
    c = ens.compact
    assert c.arrays["nodes"].shape[0] == 5 and c.n_nodes == 5  # one slot a member: its root, a leaf
    codes = data.encode(X, ens.schema, ens.binning)
    np.testing.assert_array_equal(score(codes, ens.compact, threads=2), _reference(ens, codes))


def test_unpacked_forest_packs_to_the_same_records(model):
    # a run resumed from compact chunk files rebuilds the learner's arrays from them
    ens = model[0]
    c = ens.compact
    back = c.to_forest()
    back.validate(len(ens.schema.names), c.n_out)
    for name in ("left", "right", "feature", "is_cat", "missing_left", "node_offset", "mask_offset"):
        assert back.arrays[name].shape == ens.wide.arrays[name].shape, name
    again = Compact.from_forest(back, c.kind)
    for k, v in c.arrays.items():
        np.testing.assert_array_equal(again.arrays[k], v, err_msg=k)


@pytest.mark.parametrize("threads", [1, 3])
def test_a_model_in_parts_scores_as_one_and_keeps_the_bits_through_a_file(model, tmp_path, threads):
    # a run's model holds one part per checkpoint: its trees add in member order, as one part's do
    from baggr.model.arena import Arena
    from baggr.model.compact import Stack
    from baggr.model.ensemble import Ensemble
    ens, codes, want = model
    c = ens.compact
    whole = Arena(c.kind, c.n_out, c.members, 1500, True)
    whole.extend(c)
    parts = Stack([whole.compact(0, 2), whole.compact(2, 3), whole.compact(3, c.members)])
    np.testing.assert_array_equal(score(codes, parts, threads=threads), want)
    split = Ensemble(ens.schema, ens.binning, ens.config, parts, ens.oob, ens.stats)
    split.save(tmp_path / "parts.npz")
    back = baggr.load(tmp_path / "parts.npz")
    assert isinstance(back.forest, Stack) and [p.members for p in back.forest.parts] == [2, 1, c.members - 3]
    np.testing.assert_array_equal(score(codes, back.compact, threads=threads), want)
    np.testing.assert_array_equal(score(codes, back.compact.head(4), threads=threads),
                                  score(codes, c.head(4), threads=1))
