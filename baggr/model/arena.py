"""Kept trees packed end to end as they arrive, in reserved memory that never moves.

Packing a run's trees at its end copied every kept node once more: memory the process had never
touched, twice the trees' size at the peak, and a wait of a second and more after the last member
on this VM, where a first touch costs about 3 us a page (R3, 64 members: 327 MiB, 1.0-1.6 s).
Here each tree is copied into place once, when its member is folded, and the ensemble is a set
of views. Each field is one reservation of address space sized for the largest possible run
(members x (2 rows - 1) nodes); only the pages written become resident.
"""
from __future__ import annotations

import mmap
import sys
from types import SimpleNamespace

import numpy as np

from baggr.model.forest import FIELDS, NODE_FIELDS, Forest

# Linux: reserve address space without committing memory for it (Python's mmap module does not
# name the flag; 0x4000 is MAP_NORESERVE in the Linux ABI)
_NORESERVE = 0x4000 if sys.platform.startswith("linux") else 0


def _reserve(shape, dtype) -> np.ndarray | None:
    """A zero-filled array of `shape` whose pages become resident only when written; None where
    the system will not reserve that much address space."""
    size = max(int(np.prod(shape)) * np.dtype(dtype).itemsize, 1)
    if not _NORESERVE:
        return None
    try:
        buf = mmap.mmap(-1, size, flags=mmap.MAP_PRIVATE | mmap.MAP_ANONYMOUS | _NORESERVE)
    except (OSError, ValueError, OverflowError):
        return None
    return np.frombuffer(buf, dtype=dtype, count=int(np.prod(shape))).reshape(shape)


class Arena:
    """Room for up to `max_nodes` nodes and `max_masks` categorical masks, appended in member order.

    Only the thread that appends may append; views of appended trees are safe to read from any
    thread, and stay valid for as long as they are referenced.
    """

    def __init__(self, arrays: dict):
        self._a = arrays
        self.nodes, self.masks = 0, 0
        self._node_offset, self._mask_offset = [0], [0]

    @classmethod
    def reserve(cls, max_nodes: int, max_masks: int, n_out: int) -> "Arena | None":
        """An arena, or None where the address space cannot be reserved (the caller packs at the end)."""
        arrays = {}
        for name in NODE_FIELDS + ("cat_masks",):
            dtype, ndim = FIELDS[name]
            shape = (max_masks, 4) if name == "cat_masks" else (max_nodes, n_out) if ndim == 2 else (max_nodes,)
            arrays[name] = _reserve(shape, dtype)
            if arrays[name] is None:
                return None
        return cls(arrays)

    def room(self, tree) -> bool:
        """True if `tree` fits in what is left."""
        return (self.nodes + len(tree.left) <= self._a["left"].shape[0]
                and self.masks + len(tree.cat_masks) <= self._a["cat_masks"].shape[0])

    def append(self, tree) -> SimpleNamespace:
        """Copy one tree in after the last; returns the tree as views into the arena."""
        k = len(tree.left)
        km = len(tree.cat_masks)
        n0, m0 = self.nodes, self.masks
        view = SimpleNamespace()
        for name in NODE_FIELDS:
            dst = self._a[name][n0:n0 + k]
            dst[...] = getattr(tree, name)
            setattr(view, name, dst)
        masks = self._a["cat_masks"][m0:m0 + km]
        masks[...] = np.asarray(tree.cat_masks, np.uint64).reshape(-1, 4)
        view.cat_masks = masks
        self.nodes, self.masks = n0 + k, m0 + km
        self._node_offset.append(self.nodes)
        self._mask_offset.append(self.masks)
        return view

    def forest(self) -> Forest:
        """The trees appended so far, as views (later appends do not change them)."""
        a = {name: self._a[name][:self.nodes] for name in NODE_FIELDS}
        a["cat_masks"] = self._a["cat_masks"][:self.masks]
        a["node_offset"] = np.array(self._node_offset, np.int64)
        a["mask_offset"] = np.array(self._mask_offset, np.int64)
        return Forest(a)
