"""How a chunk of grown members travels from a worker to the driver: one contiguous buffer and a small
list of what is where, exact both ways.

The driver's cost per member on a cluster is mostly the bytes it receives (bench/README.md), and a
member's arrays, sent as they are, are a dozen small messages. Here every array of a chunk goes into
one buffer, each stored in the fewest bytes that give back the same bits:
- whole numbers in the narrowest type holding their range, moved up by a negative floor (-1 for
  "no child" or "no feature") when that is smaller (a feature index in one byte, a child
  index or a node's rows in two on trees under 65,536 nodes or rows); flags of 0 and 1 as bits; all
  zeros as nothing;
- a right child that is its left sibling's index + 1 (how the learner numbers children) as nothing;
- class shares that are whole draw counts over the node's draw weight (what the learner stores) as
  the counts, less the last class's (the weight less the others'); the shares are divided again on
  arrival, the same float division, so the same bits; checked on the worker, else sent as they are;
- a node's draw weight as its repeats over its distinct rows (under 65,536 more often than the weight);
- a class node's impurity (Gini or entropy of those counts) as which of the two it is, computed again
  on arrival by the learner's own function; likewise checked on the worker;
- the OOB rows as a bit per row of the table where that is smaller than their numbers.
On R1 a member goes from 0.61 MB (0.86 MB with its rows' numbers) to about 0.13 MB.
"""
from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np

from baggr.backends import wire_kernels as wk
from baggr.backends.member import MemberResult
from baggr.learn.split_kernels import ENTROPY, GINI
from baggr.learn.tree import Tree
from baggr.oob.tally import MemberDelta

ALIGN = 8
_NARROW = tuple((d, int(np.iinfo(d).min), int(np.iinfo(d).max)) for d in map(np.dtype, (
    np.uint8, np.int8, np.uint16, np.int16, np.uint32, np.int32)))
_TREE_ARRAYS = tuple(f.name for f in dataclasses.fields(Tree) if f.name != "visits")


class _Writer:
    """Arrays laid one after the other (each aligned to 8 bytes) into one uint8 buffer."""

    def __init__(self):
        self.parts: list[tuple[int, np.ndarray]] = []
        self.size = 0

    def put(self, a: np.ndarray) -> int:
        a = np.ascontiguousarray(a)
        off = self.size
        self.parts.append((off, a))
        self.size = off + -(-a.nbytes // ALIGN) * ALIGN
        return off

    def buffer(self) -> np.ndarray:
        buf = np.empty(self.size, np.uint8)
        for off, a in self.parts:
            if a.nbytes:
                buf[off:off + a.nbytes] = a.reshape(-1).view(np.uint8)
        return buf


def _put(w: _Writer, a: np.ndarray) -> tuple:
    """The spec of array a, stored in w in the fewest bytes that give back its bits."""
    dt, shape = a.dtype.str, a.shape
    if a.size and a.dtype.kind in "iub":
        lo, hi = int(a.min()), int(a.max())
        if lo == hi == 0:
            return ("zero", dt, shape)
        if lo >= 0 and hi <= 1:
            return ("bits", dt, shape, w.put(np.packbits(a.reshape(-1) != 0)))
        # a small range above a negative floor (-1 for "none") moves up to start at 0: one byte, not two
        shift = lo if lo < 0 and hi - lo < 1 << 16 and a.dtype.kind == "i" else 0
        for d, d_min, d_max in _NARROW:
            if d.itemsize < a.dtype.itemsize and d_min <= lo - shift and hi - shift <= d_max:
                return ("narrow", dt, shape, w.put((a - a.dtype.type(shift) if shift else a).astype(d)), d.str, shift)
    return ("raw", dt, shape, w.put(a))


def _get(buf: np.ndarray, spec: tuple) -> np.ndarray:
    """A fresh array (not a view of buf: a kept tree must not hold its whole chunk's buffer)."""
    kind, dt, shape = spec[0], np.dtype(spec[1]), spec[2]
    size = math.prod(shape)
    if kind == "zero":
        return np.zeros(shape, dt)
    if kind == "bits":
        return np.unpackbits(buf[spec[3]:spec[3] + -(-size // 8)], count=size).astype(dt).reshape(shape)
    if kind == "narrow":
        out = np.frombuffer(buf, np.dtype(spec[4]), size, spec[3]).astype(dt).reshape(shape)
        if spec[5]:
            out += dt.type(spec[5])
        return out
    return np.frombuffer(buf, dt, size, spec[3]).reshape(shape).copy()


def _put_tree(w: _Writer, t: Tree) -> dict:
    specs = {}
    counts = None
    for name in _TREE_ARRAYS:
        a = getattr(t, name)
        if name == "right" and np.array_equal(a, np.where(t.left >= 0, t.left + 1, -1)):
            specs[name] = ("next", a.dtype.str)
        elif name == "value" and a.ndim == 2 and a.shape[1] >= 2 and a.dtype == np.float64 \
                and t.weight.dtype == np.int32:
            counts, exact, drop = wk.shares_to_counts(np.ascontiguousarray(a), t.weight)
            if exact:
                specs[name] = ("counts", a.shape, bool(drop), _put(w, counts[:, :-1] if drop else counts))
            else:
                counts = None
                specs[name] = _put(w, a)
        elif name == "weight" and a.dtype == np.int32 and t.n_rows.dtype == np.int32 and a.size \
                and (a >= t.n_rows).all():
            # a node's draw weight is its distinct rows plus the repeats: the repeats are the smaller number
            specs[name] = ("over_rows", _put(w, a - t.n_rows))
        elif name == "impurity" and counts is not None and a.dtype == np.float64 and a.ndim == 1:
            # a class node's impurity is a function of its counts: sent as which function, when it is
            for crit in (GINI, ENTROPY):
                if wk.same_bits(wk.counts_to_impurity(counts, crit), a):
                    specs[name] = ("impurity", crit)
                    break
            else:
                specs[name] = _put(w, a)
        else:
            specs[name] = _put(w, a)
    return specs


def _get_tree(buf: np.ndarray, specs: dict, visits: int) -> Tree:
    arrays = {}
    for name in _TREE_ARRAYS:     # left before right; value and impurity once the weight is there
        s = specs[name]
        if s[0] == "next":
            left = arrays["left"]
            arrays[name] = np.where(left >= 0, left + 1, -1).astype(np.dtype(s[1]))
        elif s[0] == "over_rows":
            arrays[name] = _get(buf, s[1]) + arrays["n_rows"]
        elif s[0] not in ("counts", "impurity"):
            arrays[name] = _get(buf, s)
    s = specs["value"]
    if s[0] == "counts":
        counts = wk.whole_counts(_get(buf, s[3]), arrays["weight"], s[1][1])
        arrays["value"] = wk.counts_to_shares(counts, arrays["weight"])
        if specs["impurity"][0] == "impurity":
            arrays["impurity"] = wk.counts_to_impurity(counts, specs["impurity"][1])
    return Tree(**arrays, visits=visits)


def _put_delta(w: _Writer, d: MemberDelta, n_rows: int) -> tuple:
    rows = d.rows
    if rows.dtype == np.int32 and rows.size * 4 > n_rows // 8:   # a bit per row of the table is smaller
        r = ("mask", n_rows, w.put(wk.rows_to_bits(rows, n_rows)))
    else:
        r = _put(w, rows)
    return (d.member, r, _put(w, d.votes))


def _get_delta(buf: np.ndarray, spec: tuple) -> MemberDelta:
    member, r, v = spec
    if r[0] == "mask":
        n = r[1]
        rows = wk.bits_to_rows(buf[r[2]:r[2] + -(-n // 8)], n)
    else:
        rows = _get(buf, r)
    return MemberDelta(member, rows, _get(buf, v))


@dataclass
class WireChunk:
    """A chunk's grown members as they travel: per member its figures and where its arrays are in buf."""

    members: list[dict]
    buf: np.ndarray       # uint8: every array of the chunk

    @classmethod
    def pack(cls, results: list[MemberResult], n_rows: int) -> "WireChunk":
        """The members' results (OOB rows ascending, as the learner gives them) packed; n_rows: the table's."""
        w, members = _Writer(), []
        for r in results:
            members.append({"member": r.member, "visits": r.visits, "nodes": r.nodes, "seconds": r.seconds,
                            "importance": r.importance, "importance_seconds": r.importance_seconds,
                            "tree": None if r.tree is None else (_put_tree(w, r.tree), r.tree.visits),
                            "delta": _put_delta(w, r.delta, n_rows)})
        return cls(members, w.buffer())

    def __len__(self) -> int:
        return len(self.members)

    def unpack(self, i: int) -> MemberResult:
        """Member i of the chunk (0-based), its arrays fresh copies with their own dtypes."""
        m = self.members[i]
        tree = None if m["tree"] is None else _get_tree(self.buf, *m["tree"])
        return MemberResult(m["member"], tree, _get_delta(self.buf, m["delta"]), m["visits"], m["nodes"],
                            m["seconds"], m["importance"], m["importance_seconds"])

    @property
    def member_seconds(self) -> float:
        return sum(m["seconds"] for m in self.members)
