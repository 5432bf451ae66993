"""baggr.jit: borrowed views (arrays numba keeps no reference count for)."""
import sys

import numba
import numpy as np
import pytest

from baggr.jit import borrow


@numba.njit
def _fill(a, pair):
    b = borrow(a)
    x, y = borrow(pair)
    for i in range(b.shape[0]):
        b[i] = i
        x[i] = 2.0 * i
    return y.sum() + x.shape[0]


def test_borrowed_views_share_memory_and_leave_reference_counts_alone():
    a, x, y = np.zeros(5), np.zeros(5), np.ones(3)
    pair = (x, y)
    before = [sys.getrefcount(v) for v in (a, x, y)]
    for _ in range(200):
        got = _fill(a, pair)
    # the views write through to the caller's arrays and read their contents and shapes (numpy sees them)
    np.testing.assert_array_equal(a, np.arange(5.0))
    np.testing.assert_array_equal(x, 2.0 * np.arange(5.0))
    assert got == 3.0 + 5
    # no reference taken or dropped over 200 calls (CPython's own count; common practice, no source)
    assert [sys.getrefcount(v) for v in (a, x, y)] == before


def test_borrow_takes_arrays_or_tuples_of_arrays_only():
    @numba.njit
    def bad(v):
        return borrow(v)

    with pytest.raises(numba.core.errors.TypingError):
        bad(3.0)
    with pytest.raises(numba.core.errors.TypingError):
        bad((np.zeros(2), 1.0))
