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


def test_packed_votes_travel_exactly():
    """A cluster worker sends hard votes as a bit per row and a byte per vote: unpacked, the same arrays
    (numpy's packbits/unpackbits are inverse; common practice, no source)."""
    from baggr.backends.dask_worker import PackedDelta
    from baggr.oob.tally import MemberDelta
    rng = np.random.default_rng(4)
    n = 1003                                        # not a multiple of 8: the last byte is partly used
    rows = np.flatnonzero(rng.random(n) < 0.37).astype(np.int32)
    for votes in (rng.integers(0, 2, rows.size).astype(np.int32), rng.integers(0, 255, rows.size).astype(np.int32)):
        packed = PackedDelta.pack(MemberDelta(9, rows, votes), n)
        assert isinstance(packed, PackedDelta) and packed.bits.nbytes == (n + 7) // 8
        back = packed.unpack()
        assert back.member == 9 and back.rows.dtype == np.int32 and back.votes.dtype == np.int32
        np.testing.assert_array_equal(back.rows, rows)
        np.testing.assert_array_equal(back.votes, votes)
    # left as they are: class shares, regression values, votes of 256 classes or more, very few OOB rows
    shares = MemberDelta(1, rows, rng.random((rows.size, 3)))
    values = MemberDelta(1, rows, rng.random(rows.size))
    many = MemberDelta(1, rows, np.full(rows.size, 300, np.int32))
    few = MemberDelta(1, rows[:3], np.zeros(3, np.int32))
    for d in (shares, values, many, few):
        assert PackedDelta.pack(d, n) is d
