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
