"""The run's trees file, members/trees.npz: its kept trees, appended one part at each checkpoint,
that becomes model.npz at the end without being copied.

Each checkpoint appends the trees of the members since the last one as a part of a version-3
model file (model/file.py) and ends with a central directory, so the file is a complete .npz
archive after every step; the checkpoint then records the file's name, its length and its parts.
At the end of a run the binning, the OOB results and the model header are appended the same way
and the file is renamed model.npz: the model is written once, as the run goes, and its final
write adds only those (the trees are never on disk twice). After a stop the checkpoint names
model.npz as its trees file; a resume renames it back before it appends.

Crash safety: a step killed half way leaves a torn tail after the length the checkpoint records;
a resume cuts it off (npzfile.append), so the file is the archive of the last checkpoint again. A
rename killed half way leaves the file under one of its two names; the checkpoint's name is
looked for first, then the other. model.npz only ever appears by a rename of a complete file.
"""
from __future__ import annotations

import os

from baggr.errors import ModelFileError
from baggr.model import npzfile
from baggr.runs.files import MEMBERS, MODEL

TREES = f"{MEMBERS}/trees.npz"
TREES_FORMAT = "baggr-trees"


def _fsync_dir(path) -> None:
    try:
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
    except OSError:
        pass


class TreesFile:
    """Where a run's kept trees are on disk: file (TREES or MODEL), its complete length `end` and the
    member ranges [a, b) of its parts, in order."""

    def __init__(self, rd, record: dict | None = None):
        self.rd = rd
        rec = record or {}
        self.file, self.end = rec.get("file", TREES), rec.get("end", 0)
        self.parts = [list(p) for p in rec.get("parts", [])]
        at = 0
        ok = self.file in (TREES, MODEL) and isinstance(self.end, int) and not isinstance(self.end, bool) \
            and self.end >= 0 and isinstance(rec.get("parts", []), list)
        for p in self.parts if ok else []:
            if not (len(p) == 2 and all(isinstance(v, int) and not isinstance(v, bool) for v in p) and p[0] == at
                    and p[1] > at):
                ok = False
                break
            at = p[1]
        if not ok or (self.parts and not self.end):
            raise ModelFileError(f"{rd.path}: the checkpoint's record of the trees file is damaged")

    @property
    def stored(self) -> int:
        """Members whose trees the file holds."""
        return self.parts[-1][1] if self.parts else 0

    def record(self) -> dict:
        return {"file": self.file, "end": self.end, "parts": [list(p) for p in self.parts]}

    def where(self):
        """The path holding the trees now (the recorded name, else the other), or None."""
        for name in (self.file, MODEL if self.file == TREES else TREES):
            if (self.rd / name).exists():
                return self.rd / name
        return None

    def read(self, kind: str, n_out: int, feature_is_cat):
        """The stored trees (a Compact, or a Stack of the parts), checked; None when there are none.
        A torn tail after the recorded length is cut off first."""
        from baggr.model.compact import Compact, Stack
        if not self.parts:
            return None
        path = self.where()
        if path is None:
            raise ModelFileError(f"{self.rd / self.file}: the run's trees file is missing")
        if path == self.rd / TREES:
            size = path.stat().st_size
            if size < self.end:
                raise ModelFileError(f"{path} is shorter than the checkpoint records ({size} < {self.end} bytes)")
            if size > self.end:
                os.truncate(path, self.end)
        _, arrays = npzfile.read(path, "trees file")
        out = []
        for p, (a, b) in enumerate(self.parts):
            prefix = f"tree{p}_"
            part = Compact({k[len(prefix):]: v for k, v in arrays.items() if k.startswith(prefix)}, kind, n_out)
            try:
                part.validate(feature_is_cat, n_out)
            except ModelFileError as e:
                raise ModelFileError(f"{path}: tree part {p}: {e}") from None
            if part.members != b - a:
                raise ModelFileError(f"{path}: tree part {p} holds {part.members} members, the checkpoint {b - a}")
            out.append(part)
        return out[0] if len(out) == 1 else Stack(out)

    def _ready(self) -> None:
        """Make TREES the file to append to: a model a stop left is renamed back (its appended model
        header is cut off at the next append)."""
        path = self.where() if self.parts else None
        (self.rd / MEMBERS).mkdir(exist_ok=True)
        if path is not None and path == self.rd / MODEL:
            os.replace(path, self.rd / TREES)
            _fsync_dir(self.rd.path)
        elif self.parts and path is None:
            raise ModelFileError(f"{self.rd / self.file}: the run's trees file is missing")
        self.file = TREES

    def append(self, part, a: int, b: int) -> None:
        """Append the trees of members a..b-1 (a Compact with offsets from member a) as the next part."""
        from baggr.model.file import part_arrays
        if a != self.stored or part.members != b - a:
            raise ValueError(f"members {a}..{b - 1} do not follow the {self.stored} stored")
        self._ready()
        if not self.parts:
            self.end = 0     # a new file (a leftover one from an older checkpoint is replaced)
        parts = self.parts + [[a, b]]
        self.end = npzfile.append(self.rd / TREES, part_arrays(part, len(self.parts)),
                                  {"format": TREES_FORMAT, "parts": parts, "kind": part.kind}, end=self.end)
        self.parts = parts

    def finish(self, rest_arrays: dict, header: dict, before_rename=None) -> None:
        """Append the rest of the model (binning, OOB results, header) and rename the file model.npz.
        The record (its length before the rest) still holds for a later resume. before_rename: a
        test hook."""
        self._ready()
        npzfile.append(self.rd / TREES, rest_arrays, header, end=self.end)
        if before_rename is not None:
            before_rename()
        os.replace(self.rd / TREES, self.rd / MODEL)
        _fsync_dir(self.rd.path)
        self.file = MODEL
