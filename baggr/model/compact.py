"""The compact forest: what scoring walks and what a version-2 model file stores.

Each node is one 8-byte record (compact_kernels.py has the bit layout): an inner node holds its
feature, threshold code, flags and the slot of its two children, which sit side by side; a leaf's
record points at itself, and the leaf array holds only what scoring adds up: the class it votes
for (hard votes, 2 bytes), its value (regression, 8 bytes) or its class shares (a pure leaf as
its class, 4 bytes, others as a row of a shares table). So a node costs 9 to 12 bytes against
the 50-odd of the learner's node arrays (which also keep each node's rows, draw weight and
impurity: training figures that scoring never reads).
"""
from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np

from baggr.errors import BaggrError, ModelFileError
from baggr.model import compact_kernels as ck

CHECK_SPAN = 4096   # members a thread checks at a time
KINDS = {"votes": ck.VOTES, "values": ck.VALUES, "shares": ck.SHARES}
LEAF_DTYPES = {"votes": np.uint16, "values": np.float64, "shares": np.int32}
# name -> (dtype, ndim) of every array of a compact forest (leaves: LEAF_DTYPES by kind)
FIELDS = {"nodes": (np.uint64, 1), "offset": (np.int64, 1), "leaf_offset": (np.int64, 1), "leaves": (None, 1),
          "shares": (np.float64, 2)}

_FAULTS = {
    ck.BAD_OFFSETS: "tree offsets do not cover the stored nodes and leaves",
    ck.BAD_FLAGS: "a split's flags or kind do not match its feature's kind",
    ck.BAD_FEATURE: "a split names a feature outside the table",
    ck.BAD_THRESHOLD: "a split threshold is outside the bins 0..254",
    ck.BAD_CHILD: "a node's children lie outside its tree or not after it (a cycle or a damaged file)",
    ck.TWICE: "a node is reached twice (a damaged file)",
    ck.UNREACHED: "a node is reached from no parent (a damaged file)",
    ck.BAD_LEAF: "a leaf is damaged or holds a class, share row or value out of range",
    ck.BAD_LEAF_COUNT: "leaves are not numbered in order or do not match the leaf offsets",
    ck.BAD_KIND: "the forest's kind is unknown",
}


def kind_for(task: str, vote: str) -> str:
    """What a leaf holds for a model of this task and vote."""
    if task == "regression":
        return "values"
    return "votes" if vote == "hard" else "shares"


@dataclass
class Compact:
    """All members' records end to end: tree t owns slots offset[t]..offset[t+1]-1 and leaves
    leaf_offset[t]..leaf_offset[t+1]-1."""

    arrays: dict
    kind: str
    n_out: int
    _sets: int | None = field(default=None, repr=False, compare=False)

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
        if (kind == "values" and n_out != 1) or n_out > 65535:
            raise BaggrError(f"{n_out} outputs cannot be packed as {kind}")
        value = np.ascontiguousarray(a["value"])
        slots, leaves, impure = ck.pack_count(a["left"], a["is_cat"], value, a["node_offset"], code)
        if int(slots.max(initial=0)) >= ck.MAX_SLOTS or int(leaves.max(initial=0)) > ck.MAX_LEAVES \
                or (a["feature"].shape[0] and int(a["feature"].max()) >= ck.FEATURE_LIMIT):
            raise BaggrError(f"trees of more than {ck.MAX_LEAVES:,} leaves or on more than {ck.FEATURE_LIMIT:,} "
                             "features do not fit the compact layout")
        offset = np.concatenate([[0], np.cumsum(slots)]).astype(np.int64)
        leaf_offset = np.concatenate([[0], np.cumsum(leaves)]).astype(np.int64)
        share_offset = np.concatenate([[0], np.cumsum(impure)]).astype(np.int64)
        nodes = np.zeros(int(offset[-1]), np.uint64)
        leaf = np.zeros(int(leaf_offset[-1]), LEAF_DTYPES[kind])
        shares = np.zeros((int(share_offset[-1]), n_out), np.float64)
        ck.pack_fill(a["left"], a["right"], a["feature"], a["threshold"], a["is_cat"], a["missing_left"], value,
                     a["cat_masks"], a["node_offset"], a["mask_offset"], code, offset, leaf_offset, share_offset,
                     nodes, leaf, shares)
        return cls({"nodes": nodes, "offset": offset, "leaf_offset": leaf_offset, "leaves": leaf, "shares": shares},
                   kind, n_out, int(a["cat_masks"].shape[0]))

    def validate(self, feature_is_cat: np.ndarray, n_out: int, threads: int | None = None) -> None:
        """Check every array and every slot a walk could follow.
        A fault raises ModelFileError naming it (and the member and slot where it lies)."""
        a = self.arrays
        if self.kind not in KINDS:
            raise ModelFileError(f"unknown kind of leaves {self.kind!r}")
        for name, (dtype, ndim) in FIELDS.items():
            if name not in a:
                raise ModelFileError(f"model file lacks the tree array '{name}'")
            x = a[name]
            dtype = LEAF_DTYPES[self.kind] if dtype is None else dtype
            if x.dtype != np.dtype(dtype) or x.ndim != ndim:
                raise ModelFileError(f"tree array '{name}' has dtype {x.dtype} and {x.ndim} dimensions; "
                                     f"expected {np.dtype(dtype)} with {ndim}")
        if n_out != self.n_out or a["shares"].shape[1] != n_out or (self.kind == "values" and n_out != 1):
            raise ModelFileError(f"tree leaves have {self.n_out} outputs; the schema needs {n_out}")
        off, loff = a["offset"], a["leaf_offset"]
        if off.shape[0] < 1 or off.shape[0] != loff.shape[0]:
            raise ModelFileError("tree offsets do not cover the stored nodes and leaves")
        if not np.all(np.isfinite(a["shares"])):
            raise ModelFileError("leaf shares hold NaN or infinity")
        if off[0] != 0 or off[-1] != a["nodes"].shape[0] or loff[0] != 0 or loff[-1] != a["leaves"].shape[0]:
            raise ModelFileError("tree offsets do not cover the stored nodes and leaves")
        is_cat = np.ascontiguousarray(feature_is_cat, dtype=np.uint8)
        m = off.shape[0] - 1
        # trees in spans over threads (the check releases the GIL): a large model checks in a fraction
        spans = [(lo, min(m, lo + CHECK_SPAN)) for lo in range(0, m, CHECK_SPAN)]
        threads = threads or (len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1)

        def run(span):
            lo, hi = span
            return lo, ck.check(a["nodes"], off[lo:hi + 1], loff[lo:hi + 1], a["leaves"], a["shares"].shape[0],
                                KINDS[self.kind], n_out, is_cat)
        if len(spans) > 1 and threads > 1:
            with ThreadPoolExecutor(max_workers=threads) as pool:
                results = list(pool.map(run, spans))
        else:
            results = [run(s) for s in spans]
        sets = 0
        for lo, (fault, tree, slot, n_sets) in results:
            if fault != ck.OK:
                where = f" (member {lo + tree}, slot {slot})" if tree >= 0 else ""
                raise ModelFileError(_FAULTS.get(fault, "the trees are damaged") + where)
            sets += n_sets
        self._sets = int(sets)

    def head(self, k: int) -> "Compact":
        """The first k members (views; share rows are numbered in member order, so all of them stay)."""
        a = self.arrays
        off, loff = a["offset"][:k + 1], a["leaf_offset"][:k + 1]
        return Compact({"nodes": a["nodes"][:off[-1]], "offset": off, "leaf_offset": loff,
                        "leaves": a["leaves"][:loff[-1]], "shares": a["shares"]}, self.kind, self.n_out)

    def to_forest(self):
        """The learner's node arrays of these trees (a Forest), for a run that goes on from them:
        packing it again gives these records back bit for bit. What the compact layout does not keep
        is zero (rows, draw weight, impurity) or one-hot (a hard vote's class)."""
        from baggr.model.forest import FIELDS, Forest
        a = self.arrays
        sets, m = self._count_sets(), self.members
        n = self.n_nodes
        w = {name: np.zeros((n, self.n_out) if name == "value" else (sets, 4) if name == "cat_masks" else
                            (m + 1,) if name.endswith("_offset") else (n,), dtype) for name, (dtype, _) in FIELDS.items()}
        ck.unpack(a["nodes"], a["offset"], a["leaf_offset"], a["leaves"], a["shares"], KINDS[self.kind], w["left"],
                  w["right"], w["feature"], w["threshold"], w["is_cat"], w["missing_left"], w["value"], w["cat_masks"],
                  w["node_offset"], w["mask_offset"])
        return Forest(w)

    @property
    def n_sets(self) -> int:
        """Categorical splits (each with a level set in 4 slots)."""
        return self._count_sets()

    def _count_sets(self) -> int:
        if self._sets is None:
            self._sets = int(ck.count_sets(self.arrays["nodes"], self.arrays["offset"]))
        return self._sets

    @property
    def n_nodes(self) -> int:
        """Nodes stored (slots less the categorical level sets, 4 slots each)."""
        return int(self.arrays["nodes"].shape[0]) - 4 * self._count_sets()

    @property
    def has_cat(self) -> bool:
        """True if some split is on a categorical feature (scoring then takes the general step)."""
        return self._count_sets() > 0


@dataclass
class Stack:
    """Compact forests of consecutive members, in member order: a model file a run wrote as it went
    holds one part per checkpoint (file.py). Scoring adds the parts' trees in member order, so a
    Stack scores bit for bit as the one Compact of all its members would."""

    parts: list

    @property
    def kind(self) -> str:
        return self.parts[0].kind

    @property
    def n_out(self) -> int:
        return self.parts[0].n_out

    @property
    def members(self) -> int:
        return sum(p.members for p in self.parts)

    @property
    def nbytes(self) -> int:
        return sum(p.nbytes for p in self.parts)

    @property
    def n_nodes(self) -> int:
        return sum(p.n_nodes for p in self.parts)

    @property
    def n_sets(self) -> int:
        return sum(p.n_sets for p in self.parts)

    @property
    def has_cat(self) -> bool:
        return any(p.has_cat for p in self.parts)

    def validate(self, feature_is_cat: np.ndarray, n_out: int, threads: int | None = None) -> None:
        at = 0
        for p in self.parts:
            try:
                p.validate(feature_is_cat, n_out, threads)
            except ModelFileError as e:
                raise ModelFileError(f"tree part from member {at}: {e}") from None
            at += p.members

    def head(self, k: int) -> "Stack":
        """The first k members (views)."""
        out, left = [], k
        for p in self.parts:
            if left <= 0:
                break
            out.append(p if p.members <= left else p.head(left))
            left -= p.members
        return Stack(out)

    def to_forest(self):
        """The learner's node arrays of all parts' trees, one Forest (see Compact.to_forest)."""
        from baggr.model.forest import Forest
        forests = [p.to_forest().unpack() for p in self.parts]
        return Forest.pack([t for f in forests for t in f], self.n_out)


def parts_of(trees) -> list:
    """The Compact parts of a Compact or a Stack, in member order."""
    return list(trees.parts) if isinstance(trees, Stack) else [trees]
