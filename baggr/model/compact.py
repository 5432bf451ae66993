"""The compact forest: what scoring walks and what a version-2 model file stores.

Each node is one 8-byte record (compact_kernels.py has the bit layout): an inner node holds its
feature, threshold code, flags and the slot of its two children, which sit side by side; a leaf
holds only what scoring adds up: the class it votes for (hard votes), its value (regression),
or its class shares (a pure leaf as its class, others as a row of a shares table). So a node
costs 8 bytes against the 50-odd of the learner's node arrays (which also keep each node's rows,
draw weight and impurity: training figures that scoring never reads).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from baggr.errors import BaggrError, ModelFileError
from baggr.model import compact_kernels as ck

KINDS = {"votes": ck.VOTES, "values": ck.VALUES, "shares": ck.SHARES}
# name -> (dtype, ndim) of every array of a compact forest
FIELDS = {"nodes": (np.uint64, 1), "offset": (np.int64, 1), "root_leaf": (np.uint8, 1),
          "shares": (np.float64, 2)}

_FAULTS = {
    ck.BAD_OFFSETS: "tree offsets do not cover the stored nodes",
    ck.BAD_ROOT: "a root's leaf flag is not 0 or 1",
    ck.BAD_FLAGS: "a split's kind does not match its feature's kind",
    ck.BAD_FEATURE: "a split names a feature outside the table",
    ck.BAD_THRESHOLD: "a split threshold is outside the bins 0..254",
    ck.BAD_CHILD: "a node's children lie outside its tree or not after it (a cycle or a damaged file)",
    ck.TWICE: "a node is reached twice (a damaged file)",
    ck.UNREACHED: "a node is reached from no parent (a damaged file)",
    ck.BAD_LEAF: "a leaf holds a class, share row or value out of range",
    ck.BAD_KIND: "the forest's kind is unknown",
}


def kind_for(task: str, vote: str) -> str:
    """What a leaf holds for a model of this task and vote."""
    if task == "regression":
        return "values"
    return "votes" if vote == "hard" else "shares"


@dataclass
class Compact:
    """All members' records end to end: tree t owns slots tree_offset[t]..tree_offset[t+1]-1."""

    arrays: dict
    kind: str
    n_out: int
    _counts: tuple | None = field(default=None, repr=False, compare=False)

    @property
    def members(self) -> int:
        return int(self.arrays["offset"].shape[0] - 1)

    @property
    def nbytes(self) -> int:
        return int(sum(a.nbytes for a in self.arrays.values()))

    @classmethod
    def from_forest(cls, forest, kind: str) -> "Compact":
        """Pack a validated Forest (the learner's node arrays) for `kind` ("votes", "values", "shares")."""
        a, code = forest.arrays, KINDS[kind]
        n_out = forest.n_out
        if kind == "values" and n_out != 1:
            raise ValueError("a regression forest has one value per leaf")
        value = np.ascontiguousarray(a["value"])
        slots, impure = ck.pack_count(a["left"], a["is_cat"], value, a["node_offset"], code)
        if int(slots.max(initial=0)) >= ck.MAX_SLOTS or (a["feature"].shape[0] and int(a["feature"].max()) >= ck.MAX_FEATURES):
            raise BaggrError(f"trees of more than {ck.MAX_SLOTS - 1:,} nodes or on more than {ck.MAX_FEATURES:,} "
                             "features do not fit the compact layout")
        tree_offset = np.concatenate([[0], np.cumsum(slots)]).astype(np.int64)
        share_offset = np.concatenate([[0], np.cumsum(impure)]).astype(np.int64)
        nodes = np.zeros(int(tree_offset[-1]), np.uint64)
        root_leaf = np.zeros(forest.members, np.uint8)
        shares = np.zeros((int(share_offset[-1]), n_out), np.float64)
        ck.pack_fill(a["left"], a["right"], a["feature"], a["threshold"], a["is_cat"], a["missing_left"], value,
                     value.view(np.uint64), a["cat_masks"], a["node_offset"], a["mask_offset"], code, tree_offset,
                     share_offset, nodes, root_leaf, shares)
        return cls({"nodes": nodes, "offset": tree_offset, "root_leaf": root_leaf, "shares": shares},
                   kind, n_out)

    def validate(self, feature_is_cat: np.ndarray, n_out: int) -> None:
        """Check every array and every slot a walk could follow.
        A fault raises ModelFileError naming it (and the member and slot where it lies)."""
        a = self.arrays
        if self.kind not in KINDS:
            raise ModelFileError(f"unknown kind of leaves {self.kind!r}")
        for name, (dtype, ndim) in FIELDS.items():
            if name not in a:
                raise ModelFileError(f"model file lacks the tree array '{name}'")
            x = a[name]
            if x.dtype != np.dtype(dtype) or x.ndim != ndim:
                raise ModelFileError(f"tree array '{name}' has dtype {x.dtype} and {x.ndim} dimensions; "
                                     f"expected {np.dtype(dtype)} with {ndim}")
        if n_out != self.n_out or a["shares"].shape[1] != n_out or (self.kind == "values" and n_out != 1):
            raise ModelFileError(f"tree leaves have {self.n_out} outputs; the schema needs {n_out}")
        off = a["offset"]
        if off.shape[0] < 1 or off[0] != 0 or off[-1] != a["nodes"].shape[0] or np.any(np.diff(off) < 1):
            raise ModelFileError("tree offsets do not cover the stored nodes")
        if a["root_leaf"].shape[0] != off.shape[0] - 1:
            raise ModelFileError("the root flags do not match the number of members")
        if not np.all(np.isfinite(a["shares"])):
            raise ModelFileError("leaf shares hold NaN or infinity")
        fault, tree, slot, sets = ck.check(a["nodes"], a["nodes"].view(np.float64), off, a["root_leaf"],
                                     a["shares"].shape[0], KINDS[self.kind], n_out,
                                     np.ascontiguousarray(feature_is_cat, dtype=np.uint8))
        if fault != ck.OK:
            where = f" (member {tree}, slot {slot})" if tree >= 0 else ""
            raise ModelFileError(_FAULTS.get(fault, "the trees are damaged") + where)
        self._counts = (int(a["nodes"].shape[0] - 4 * sets), int(sets))

    def _count(self) -> tuple[int, int]:
        if self._counts is None:
            a = self.arrays
            self._counts = tuple(int(x) for x in ck.count_nodes(a["nodes"], a["offset"], a["root_leaf"]))
        return self._counts

    @property
    def n_nodes(self) -> int:
        """Nodes stored (slots less the categorical level sets, 4 slots each)."""
        return self._count()[0]

    @property
    def has_cat(self) -> bool:
        """True if some split is on a categorical feature (scoring then takes the general step)."""
        return self._count()[1] > 0
