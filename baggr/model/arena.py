"""Kept trees packed into the compact layout (compact.py) as each member arrives, in reserved memory.

A run that keeps its trees holds them in the form the model file stores and scoring walks: 8-byte
node records and the leaf array, 9 to 12 bytes a node, not the learner's node arrays (about 42
bytes a node and 8 a class: rows, draw weight and impurity scoring never reads). Each tree is
packed straight into place when its member is folded, so the ensemble is a set of views and
nothing is packed again at the end. Each array is one reservation of address space sized for the
largest possible run; only the pages written become resident. Where the system will not reserve
that much, the arrays start smaller and move to a larger home when full (earlier views stay valid:
they keep the old memory alive).
"""
from __future__ import annotations

import mmap
import sys

import numpy as np

from baggr.errors import BaggrError
from baggr.model import compact_kernels as ck
from baggr.model.compact import KINDS, LEAF_DTYPES, Compact

# Linux: reserve address space without committing memory for it (Python's mmap module does not
# name the flag; 0x4000 is MAP_NORESERVE in the Linux ABI)
_NORESERVE = 0x4000 if sys.platform.startswith("linux") else 0
MAX_RESERVE = 1 << 42          # bytes of address space one array asks for at most
START = 1 << 16                # elements an array starts with where nothing can be reserved


def _reserve(count: int, dtype, width: int = 0) -> np.ndarray:
    """Zero-filled room for `count` elements (rows of `width` when width > 0): reserved address
    space whose pages become resident only when written, or (where that is refused) a smaller
    ordinary array that grows when full."""
    item = np.dtype(dtype).itemsize * max(width, 1)
    count = max(1, min(int(count), MAX_RESERVE // item))
    shape = (count, width) if width else (count,)
    if _NORESERVE:
        while count >= START:
            try:
                buf = mmap.mmap(-1, count * item, flags=mmap.MAP_PRIVATE | mmap.MAP_ANONYMOUS | _NORESERVE)
                return np.frombuffer(buf, dtype=dtype, count=count * max(width, 1)).reshape(shape)
            except (OSError, ValueError, OverflowError):
                count //= 4
                shape = (count, width) if width else (count,)
    count = min(count, START)
    return np.zeros((count, width) if width else (count,), dtype)


def _c(a, dtype):
    return np.ascontiguousarray(a, dtype=dtype)


class Arena:
    """Room for the kept trees of up to `members` members of at most `rows` rows, appended in member
    order in the compact layout of `kind` ("votes", "values", "shares") with n_out outputs.

    Only the thread that appends may append; views of appended trees are safe to read from any
    thread, and stay valid for as long as they are referenced.
    """

    def __init__(self, kind: str, n_out: int, members: int, rows: int, any_cat: bool):
        self.kind, self.n_out = kind, n_out
        rows, members = max(int(rows), 1), max(int(members), 1)
        per_tree = 2 * rows - 1 + (4 * (rows - 1) if any_cat else 0)
        self._nodes = _reserve(members * per_tree, np.uint64)
        self._leaves = _reserve(members * rows, LEAF_DTYPES[kind])
        self._shares = _reserve(members * rows if kind == "shares" else 1, np.float64, n_out)
        self.slots, self.n_leaves, self.n_shares, self.sets = 0, 0, 0, 0
        self._offset, self._leaf_offset, self._share_offset = [0], [0], [0]

    @property
    def members(self) -> int:
        return len(self._offset) - 1

    @property
    def nbytes(self) -> int:
        """Bytes the appended trees take (what their model file part takes, less its offsets)."""
        return self.slots * 8 + self.n_leaves * self._leaves.itemsize + self.n_shares * 8 * self.n_out

    def _room(self, slots: int, leaves: int, shares: int) -> None:
        """Make room for that many more of each, moving an array that is full to a larger home."""
        for name, used, more in (("_nodes", self.slots, slots), ("_leaves", self.n_leaves, leaves),
                                 ("_shares", self.n_shares, shares)):
            a = getattr(self, name)
            if used + more > a.shape[0]:
                b = _reserve(max(2 * a.shape[0], used + more), a.dtype, a.shape[1] if a.ndim == 2 else 0)
                if b.shape[0] < used + more:
                    raise BaggrError("the kept trees do not fit in memory")
                b[:used] = a[:used]
                setattr(self, name, b)

    def append(self, tree) -> None:
        """Pack one tree (the learner's node arrays) in after the last."""
        code = KINDS[self.kind]
        left, is_cat = _c(tree.left, np.int32), _c(tree.is_cat, np.uint8)
        value = _c(tree.value, np.float64).reshape(len(left), -1)
        if value.shape[1] != self.n_out:
            raise ValueError(f"a tree with {value.shape[1]} outputs, the arena holds {self.n_out}")
        masks = _c(tree.cat_masks, np.uint64).reshape(-1, 4)
        node_offset = np.array([0, len(left)], np.int64)
        slots, leaves, impure = ck.pack_count(left, is_cat, value, node_offset, code)
        s, lv, k = int(slots[0]), int(leaves[0]), int(impure[0])
        if s >= ck.MAX_SLOTS or lv > ck.MAX_LEAVES or (len(left) and int(np.max(tree.feature)) >= ck.FEATURE_LIMIT):
            raise BaggrError(f"trees of more than {ck.MAX_LEAVES:,} leaves or on more than {ck.FEATURE_LIMIT:,} "
                             "features do not fit the compact layout")
        self._room(s, lv, k)
        s0, l0, k0 = self.slots, self.n_leaves, self.n_shares
        ck.pack_fill(left, _c(tree.right, np.int32), _c(tree.feature, np.int32), _c(tree.threshold, np.int32), is_cat,
                     _c(tree.missing_left, np.uint8), value, masks, node_offset, np.array([0, len(masks)], np.int64),
                     code, np.array([s0, s0 + s], np.int64), np.array([l0, l0 + lv], np.int64),
                     np.array([k0, k0 + k], np.int64), self._nodes, self._leaves, self._shares)
        self._push(s, lv, k, int(np.count_nonzero(is_cat[left >= 0])))

    def _push(self, slots: int, leaves: int, shares: int, sets: int) -> None:
        self.slots += slots
        self.n_leaves += leaves
        self.n_shares += shares
        self.sets += sets
        self._offset.append(self.slots)
        self._leaf_offset.append(self.n_leaves)
        self._share_offset.append(self.n_shares)

    def extend(self, trees) -> None:
        """Copy in the members of a checked Compact (or a Stack of them), in order, after the last."""
        for part in getattr(trees, "parts", [trees]):
            if part.kind != self.kind or part.n_out != self.n_out:
                raise ValueError(f"{part.kind} trees with {part.n_out} outputs, the arena holds {self.kind}")
            a = part.arrays
            off, loff = a["offset"], a["leaf_offset"]
            shares = a["shares"]
            self._room(int(off[-1]), int(loff[-1]), shares.shape[0])
            s0, l0, k0 = self.slots, self.n_leaves, self.n_shares
            self._nodes[s0:s0 + off[-1]] = a["nodes"]
            leaves = self._leaves[l0:l0 + loff[-1]]
            leaves[...] = a["leaves"]
            if self.kind == "shares":    # share rows are numbered from the part's first: renumber them
                leaves[leaves >= 0] += k0
                self._shares[k0:k0 + shares.shape[0]] = shares
            sets = part.n_sets
            rows = np.zeros(part.members + 1, np.int64)
            if self.kind == "shares" and part.members:   # a member's share rows: its leaves that point at one
                pos = np.concatenate([[0], np.cumsum(a["leaves"] >= 0)])
                rows = pos[loff]
            self._offset.extend((s0 + off[1:]).tolist())
            self._leaf_offset.extend((l0 + loff[1:]).tolist())
            self._share_offset.extend((k0 + rows[1:]).tolist())
            self.slots, self.n_leaves = s0 + int(off[-1]), l0 + int(loff[-1])
            self.n_shares, self.sets = k0 + (int(rows[-1]) if self.kind == "shares" else 0), self.sets + sets

    def compact(self, a: int = 0, b: int | None = None) -> Compact:
        """Members a..b-1 (default: all appended) as a Compact of views (later appends do not change
        it); offsets count from member a, and share rows from its first."""
        b = self.members if b is None else b
        off = np.array(self._offset[a:b + 1], np.int64)
        loff = np.array(self._leaf_offset[a:b + 1], np.int64)
        k0, k1 = self._share_offset[a], self._share_offset[b]
        leaves = self._leaves[loff[0]:loff[-1]]
        if self.kind == "shares" and k0:
            leaves = leaves.copy()
            leaves[leaves >= 0] -= k0
        arrays = {"nodes": self._nodes[off[0]:off[-1]], "offset": off - off[0], "leaf_offset": loff - loff[0],
                  "leaves": leaves, "shares": self._shares[k0:k1]}
        return Compact(arrays, self.kind, self.n_out, self.sets if (a == 0 and b == self.members) else None)
