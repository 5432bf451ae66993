"""Trees packed end to end in flat arrays: what a model file stores and what scoring walks."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from baggr.errors import ModelFileError

# name -> (dtype, ndim) of every packed array
FIELDS = {
    "left": (np.int32, 1), "right": (np.int32, 1), "feature": (np.int32, 1), "threshold": (np.int32, 1),
    "is_cat": (np.uint8, 1), "missing_left": (np.uint8, 1), "value": (np.float64, 2),
    "n_rows": (np.int32, 1), "weight": (np.int32, 1), "impurity": (np.float64, 1),
    "cat_masks": (np.uint64, 2), "node_offset": (np.int64, 1), "mask_offset": (np.int64, 1),
}
NODE_FIELDS = ("left", "right", "feature", "threshold", "is_cat", "missing_left", "value", "n_rows", "weight", "impurity")


@dataclass
class Forest:
    """All members' node arrays concatenated; child and mask indices are local to each tree."""

    arrays: dict

    @property
    def members(self) -> int:
        return int(self.arrays["node_offset"].shape[0] - 1)

    @property
    def n_out(self) -> int:
        return int(self.arrays["value"].shape[1])

    @classmethod
    def pack(cls, trees: list, n_out: int) -> "Forest":
        a = {}
        for name in NODE_FIELDS:
            dtype, ndim = FIELDS[name]
            parts = [np.asarray(getattr(t, name), dtype=dtype) for t in trees]
            empty = np.zeros((0, n_out) if ndim == 2 else 0, dtype)
            a[name] = np.ascontiguousarray(np.concatenate(parts) if parts else empty)
        masks = [np.asarray(t.cat_masks, np.uint64).reshape(-1, 4) for t in trees]
        a["cat_masks"] = np.ascontiguousarray(np.concatenate(masks) if masks else np.zeros((0, 4), np.uint64))
        a["node_offset"] = np.concatenate([[0], np.cumsum([len(t.left) for t in trees])]).astype(np.int64)
        a["mask_offset"] = np.concatenate([[0], np.cumsum([m.shape[0] for m in masks])]).astype(np.int64)
        return cls(a)

    def unpack(self) -> list:
        """The members as separate trees (views into the packed arrays)."""
        from types import SimpleNamespace
        a, out = self.arrays, []
        for m in range(self.members):
            n0, n1 = a["node_offset"][m], a["node_offset"][m + 1]
            k0, k1 = a["mask_offset"][m], a["mask_offset"][m + 1]
            t = SimpleNamespace(**{name: a[name][n0:n1] for name in NODE_FIELDS})
            t.cat_masks = a["cat_masks"][k0:k1]
            out.append(t)
        return out

    def validate(self, n_features: int, n_out: int) -> None:
        """Check every index a traversal will follow, so scoring a loaded file can never read out of bounds."""
        a = self.arrays
        for name, (dtype, ndim) in FIELDS.items():
            if name not in a:
                raise ModelFileError(f"model file lacks the tree array '{name}'")
            x = a[name]
            if x.dtype != np.dtype(dtype) or x.ndim != ndim:
                raise ModelFileError(f"tree array '{name}' has dtype {x.dtype} and {x.ndim} dimensions; "
                                     f"expected {np.dtype(dtype)} with {ndim}")
        n = a["left"].shape[0]
        for name in NODE_FIELDS:
            if a[name].shape[0] != n:
                raise ModelFileError(f"tree array '{name}' has {a[name].shape[0]} nodes; 'left' has {n}")
        if a["value"].shape[1] != n_out:
            raise ModelFileError(f"tree values have {a['value'].shape[1]} outputs; the schema needs {n_out}")
        if a["cat_masks"].shape[1] != 4:
            raise ModelFileError("categorical masks must be 256 bits (4 words) wide")
        for off, total, what in ((a["node_offset"], n, "node"), (a["mask_offset"], a["cat_masks"].shape[0], "mask")):
            if off.shape[0] < 1 or off[0] != 0 or off[-1] != total or np.any(np.diff(off) < 0):
                raise ModelFileError(f"{what} offsets do not cover the stored {what}s")
        if a["node_offset"].shape[0] != a["mask_offset"].shape[0]:
            raise ModelFileError("node and mask offsets disagree on the number of members")
        if np.any(np.diff(a["node_offset"]) < 1):
            raise ModelFileError("a member has no nodes")
        if n == 0:
            return
        tree_of = np.repeat(np.arange(self.members), np.diff(a["node_offset"]))
        local = np.arange(n) - a["node_offset"][tree_of]
        size = np.diff(a["node_offset"])[tree_of]
        left, right, feat = a["left"], a["right"], a["feature"]
        leaf = left == -1
        if np.any(leaf != (right == -1)) or np.any(leaf != (feat == -1)):
            raise ModelFileError("a node is half leaf, half split (children and feature disagree)")
        inner = ~leaf
        # Children always lie after their parent inside the same tree: no cycles, no escape.
        for child, side in ((left, "left"), (right, "right")):
            bad = inner & ((child <= local) | (child >= size))
            if np.any(bad):
                i = int(np.flatnonzero(bad)[0])
                raise ModelFileError(f"node {local[i]} of member {tree_of[i]} has {side} child {child[i]} "
                                     "outside its tree or not after it (a cycle or a damaged file)")
        if np.any(inner & ((feat < 0) | (feat >= n_features))):
            raise ModelFileError(f"a split names a feature outside 0..{n_features - 1}")
        is_cat, thr = a["is_cat"], a["threshold"]
        if np.any(is_cat > 1) or np.any(a["missing_left"] > 1):
            raise ModelFileError("split flags must be 0 or 1")
        n_masks = np.diff(a["mask_offset"])[tree_of]
        num = inner & (is_cat == 0)
        cat = inner & (is_cat == 1)
        if np.any(num & ((thr < 0) | (thr > 254))):
            raise ModelFileError("a numeric split threshold is outside the bins 0..254")
        if np.any(cat & ((thr < 0) | (thr >= n_masks))):
            raise ModelFileError("a categorical split points outside its member's level sets")
        if not np.all(np.isfinite(a["value"])):
            raise ModelFileError("tree values hold NaN or infinity")
