"""Backends: any backend that hands members back in member order gives the same run, bit for bit.

The fold is exact however members are grown (DESIGN.md "Tallies add"): a backend that grows chunks
out of order, late and twice must end identical to local threads.
"""
import random

import numpy as np

from baggr.backends.base import Backend
from baggr.config import Config
from baggr.engine import Training
from generators import twonorm


class Shuffled(Backend):
    """Grows chunks of 3 members in a random order, each twice, and yields them in member order."""

    def members(self, grower, start, stop):
        chunks = [range(a, min(a + 3, stop)) for a in range(start, stop, 3)]
        order = chunks * 2
        random.Random(5).shuffle(order)
        done = {}
        for ch in order:
            for r in grower.grow_chunk(ch):
                done.setdefault(r.member, r)
        for m in range(start, stop):
            yield done.pop(m)


def _run(backend, keep=True):
    X, y = twonorm(300, seed=3)
    cfg = Config(members=11, seed=7, threads=2, keep_members=keep)
    tr = Training(X, y, cfg)
    return tr.run(backend=backend)


def test_out_of_order_chunks_equal_threads():
    a, b = _run(None), _run(Shuffled())
    for k, v in a.oob.arrays().items():
        np.testing.assert_array_equal(v, b.oob.arrays()[k], err_msg=k)
    for k, v in a.forest.arrays.items():
        np.testing.assert_array_equal(v, b.forest.arrays[k], err_msg=k)


def test_stopping_early_closes_the_backend():
    closed = []

    class Counting(Shuffled):
        def close(self):
            closed.append(True)

    X, y = twonorm(200, seed=1)
    tr = Training(X, y, Config(members=9, seed=1, threads=1))
    ens = tr.run(backend=Counting(), should_stop=lambda: tr.next_member >= 4)
    assert ens.members == 4 and closed == [True]


def _same_result(a, b):
    """Every field of two MemberResults, arrays bit for bit with their dtypes and shapes."""
    assert (a.member, a.visits, a.nodes, a.seconds) == (b.member, b.visits, b.nodes, b.seconds)
    assert (a.tree is None) == (b.tree is None)
    pairs = [(a.delta.rows, b.delta.rows), (a.delta.votes, b.delta.votes)]
    if a.tree is not None:
        assert a.tree.visits == b.tree.visits
        pairs += [(v, getattr(b.tree, k)) for k, v in vars(a.tree).items() if isinstance(v, np.ndarray)]
    for x, y in pairs:
        assert x.dtype == y.dtype and x.shape == y.shape
        assert x.tobytes() == y.tobytes()        # the bits, not only equal values (-0.0, NaN)


def _grown(X, y, cfg, members):
    tr = Training(X, y, cfg)
    out = tr.grower.grow_chunk(members)
    return out, tr.prep.n_rows


def test_chunks_travel_exactly():
    """A cluster worker packs a chunk's trees and OOB deltas into one buffer (narrow whole numbers, bits,
    class shares as draw counts): unpacked, the same bits. numpy's packbits/unpackbits and integer
    casts within range are exact, and IEEE division of the same two numbers gives the same double
    (common practice, no source)."""
    import pickle

    from baggr.backends.dask_wire import WireChunk
    from generators import friedman1
    X, y = twonorm(1003, seed=3)       # 1003 rows: the last byte of a row mask is partly used
    import pyarrow as pa
    cols = {f"x{j}": X[:, j] for j in range(1, 6)}
    cols["kind"] = np.array(["abcdefg"[int(v)] for v in np.clip(np.abs(X[:, 0]) * 3, 0, 6)])   # categories
    Xc = pa.table(cols)
    cases = [(X, y, Config(members=4, seed=2)),
             (X, y, Config(members=4, seed=2, vote="shares", keep_members=False)),
             (X, y, Config(members=4, seed=2, importance=True, min_leaf=5)),
             (Xc, y, Config(members=4, seed=2)),
             (X, y, Config(members=3, seed=2, criterion="entropy")),
             (*friedman1(700, seed=1), Config(members=3, seed=1, min_leaf=2))]
    for X_, y_, cfg in cases:
        results, n = _grown(X_, y_, cfg, range(5, 5 + cfg.members))
        if X_ is Xc:
            assert any(r.tree.is_cat.any() and r.tree.cat_masks.size for r in results)
        chunk = pickle.loads(pickle.dumps(WireChunk.pack(results, n), protocol=5))
        assert len(chunk) == len(results)
        for i, r in enumerate(results):
            _same_result(r, chunk.unpack(i))
        if y_ is y and cfg.keep_members:
            # class trees (Gini or entropy): shares and impurity went as counts and a function of them
            specs = [m["tree"][0] for m in chunk.members]
            assert all(t["value"][0] == "counts" and t["impurity"][0] == "impurity" for t in specs)
    # where the packing's assumptions fail, arrays travel as they are
    results, n = _grown(X, y, Config(members=1, seed=2), range(1))
    t = results[0].tree
    t.right = t.right.copy()
    t.right[0] += 7                             # not its left sibling's index + 1
    t.value = t.value + 1e-9                    # shares that are not whole counts over the weight
    t.n_rows = t.n_rows.astype(np.int32) + (1 << 20)   # numbers too large for 16 bits
    chunk = WireChunk.pack(results, n)
    _same_result(results[0], chunk.unpack(0))
    specs = chunk.members[0]["tree"][0]
    assert specs["right"][0] != "next" and specs["value"][0] == "raw" and specs["n_rows"][0] == "raw"


def test_packed_chunks_are_smaller():
    """On twonorm (Breiman 1996) full trees the packed member takes well under the 54 bytes a node
    (and 8 bytes an OOB row) its arrays take as they are: the point of packing."""
    from baggr.backends.dask_wire import WireChunk
    X, y = twonorm(4000, seed=1)
    results, n = _grown(X, y, Config(members=2, seed=1), range(2))
    plain = sum(a.nbytes for r in results for a in [r.delta.rows, r.delta.votes] +
                [v for v in vars(r.tree).values() if isinstance(v, np.ndarray)])
    assert WireChunk.pack(results, n).buf.nbytes < 0.55 * plain
