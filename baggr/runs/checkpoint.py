"""Checkpoints of a run: the tallies in checkpoint.npz (written atomically), the kept trees appended
to the run's trees file (trees_file.py), both in the background; reading them back; the fault hooks
the tests use to kill a job or fill its disk at a chosen point. Checkpoints of format 1 kept the
trees in chunk files members/AAAAAA-BBBBBB.npz, which a resume still reads.
"""
from __future__ import annotations

import errno
import os
import shutil
import signal
import time
from pathlib import Path

import numpy as np

from baggr.version import __version__
from baggr.config import Config
from baggr.errors import BaggrError, ModelFileError
from baggr.model import npzfile
from baggr.runs.files import CHECKPOINT, CHECKPOINT_INFO, CONFIG, MEMBERS, MODEL, write_error, write_json_atomic
from baggr.runs.rundir import RunDir, RunSettings
from baggr.runs.trees_file import TreesFile

CHECKPOINT_FORMAT = "baggr-checkpoint"
CHECKPOINT_VERSION = 2   # 1: kept trees in chunk files; 2: in the trees file
CHUNK_FORMAT = "baggr-members"
CHUNK_VERSION = 2   # 1: the learner's node arrays; 2: the compact layout of model format 2

FAULT_CHECKPOINT = "BAGGR_FAULT_CHECKPOINT"  # "enospc" or "enospc:N": the N-th checkpoint write fails
# "member:N", "chunk:N" (after the N-th checkpoint's trees), "final:1" (after the model's last trees),
# "final:2" (after its rest, before the rename) or "model" (saved): SIGKILL itself there
FAULT_KILL = "BAGGR_FAULT_KILL"


def _chunk_name(a: int, b: int) -> str:
    return f"{MEMBERS}/{a:06d}-{b:06d}.npz"


def _fault_due(count: int) -> bool:
    spec = os.environ.get(FAULT_CHECKPOINT, "")
    if not spec.startswith("enospc"):
        return False
    _, _, n = spec.partition(":")
    return count >= (int(n) if n.isdigit() else 1)


def fault_kill(point: str, n: int | None = None) -> None:
    """Test hook: die by SIGKILL at a named point (a real kill -9, no cleanup)."""
    spec = os.environ.get(FAULT_KILL)
    if spec and spec == (point if n is None else f"{point}:{n}"):
        os.kill(os.getpid(), signal.SIGKILL)


class Checkpointer:
    """Writes checkpoints of a Training: new kept trees to a chunk file, then the tallies, atomically.

    The main thread only snapshots (a copy of the tallies, the list of new trees); the files are
    written, fsynced and renamed in a background thread, so training goes on meanwhile. One write
    at a time; its error is raised in the main thread at the next due() / wait().
    """

    def __init__(self, rd: RunDir, training, settings: RunSettings, header_extra: dict, journal=None,
                 background: bool = True):
        self.rd, self.training, self.settings = rd, training, settings
        self.header_extra, self.journal, self.background = header_extra, journal, background
        self.chunks: list = []                  # [a, b, name] of chunk files a format-1 checkpoint names
        self.trees_file = TreesFile(rd)         # the kept trees written so far
        self.member = training.next_member      # members covered by the latest durable checkpoint
        self.last_started = self.member         # members covered by the latest write begun
        self.t_last = time.monotonic()
        self.cost = 0.0                         # seconds the latest checkpoint held up training
        self.writes = 0
        self.seconds = 0.0                      # seconds checkpoints held up training, in all
        self.write_seconds = 0.0                # seconds spent writing files (mostly in the background)
        self.write_cpu = 0.0                    # CPU seconds of that writing (what it takes from training)
        self._thread = None
        self._result = None

    @property
    def busy(self) -> bool:
        return self._thread is not None

    def due(self) -> bool:
        self.poll()
        m, s = self.training.next_member, self.settings
        if m <= self.last_started or (self.busy and s.checkpoint_budget):
            return False   # the default policy skips while a write is in flight; an exact one waits for it
        since = time.monotonic() - self.t_last
        if m - self.last_started < s.checkpoint_members and since < s.checkpoint_seconds:
            return False
        # Keep what checkpoints hold up under the budget share of the time, whatever the data size.
        return not s.checkpoint_budget or since >= max(s.checkpoint_min_seconds, self.cost / s.checkpoint_budget)

    def write(self, wait: bool = False) -> None:
        """Checkpoint the training as it is now; with wait, return once it is on disk.

        An OSError becomes DiskFullError / RunDirError and the previous checkpoint stays intact.
        """
        self.wait()
        t0 = time.monotonic()
        tr = self.training
        m = tr.next_member
        self.writes += 1
        self.last_started = m
        kept = self.trees_file.stored
        base = tr.trees_base          # trees before it were set aside: they are in the trees file already
        if tr.config.keep_members and kept < base:
            raise ValueError(f"trees from member {kept} on were set aside before a checkpoint stored them")
        trees = tr.kept(kept, m) if tr.config.keep_members and m > kept else None
        arrays, header = tr.checkpoint()
        arrays = {k: np.array(v, copy=True) for k, v in arrays.items()}   # the tallies move on meanwhile
        if tr.prep.task == "classes":
            arrays["class_rows"] = np.asarray(tr.tally.class_rows, np.int64).copy()
        header.update(self.header_extra, format=CHECKPOINT_FORMAT, format_version=CHECKPOINT_VERSION,
                      baggr_version=__version__, t=time.time())
        job = (self.writes, m, kept, trees, arrays, header)
        if self.background:
            import threading
            self._thread = threading.Thread(target=self._work, args=job, name="baggr-checkpoint", daemon=True)
            self._thread.start()
        else:
            self._thread = True
            self._work(*job)
        self.t_last = time.monotonic()
        self.cost = self.t_last - t0
        self.seconds += self.cost
        if wait or not self.background:
            self.wait()

    def _work(self, n, m, kept, trees, arrays, header) -> None:
        """Write one checkpoint's files (any thread); the outcome waits in _result."""
        t0, c0 = time.monotonic(), time.thread_time()
        try:
            if trees is not None:
                self.trees_file.append(trees, kept, m)
                fault_kill("chunk", n)
            if _fault_due(n):
                raise OSError(errno.ENOSPC, "No space left on device (simulated by " + FAULT_CHECKPOINT + ")")
            record = self.trees_file.record() if self.training.config.keep_members else None
            header["trees"] = record
            npzfile.write_atomic(self.rd / CHECKPOINT, arrays, header)
            write_json_atomic(self.rd / CHECKPOINT_INFO, {"member": m, "elapsed": header["elapsed"],
                                                          "t": header["t"], "trees": record})
            self._result = (m, [], None, time.monotonic() - t0, time.thread_time() - c0)
        except BaseException as e:   # handed to the main thread
            self._result = (m, None, e, time.monotonic() - t0, time.thread_time() - c0)

    def poll(self) -> None:
        """Take in a finished background write (raising its error)."""
        if self._thread is not None and (self._thread is True or not self._thread.is_alive()):
            self._take()

    def wait(self) -> None:
        """Wait for the write in flight, if any (raising its error)."""
        if self._thread is not None:
            t0 = time.monotonic()
            if self._thread is not True:
                self._thread.join()
            self.seconds += time.monotonic() - t0 if self.background else 0.0
            self._take()

    def _take(self) -> None:
        m, chunks, err, took, cpu = self._result
        self._thread, self._result = None, None
        self.write_seconds += took
        self.write_cpu += cpu
        if err is not None:
            if isinstance(err, OSError):
                raise write_error("a checkpoint to", self.rd.path, err) from None
            raise err
        self.chunks, self.member = chunks, m
        if self.journal is not None:
            self.journal.write("checkpoint", member=m)
        self._drop_superseded()

    def _drop_superseded(self) -> None:
        """Once a checkpoint's trees file holds every stored tree: what it replaces goes (chunk files
        of a format-1 checkpoint; the model a grown run or an older checkpoint started from)."""
        if self.trees_file.parts and (self.rd / self.trees_file.file).exists() and self.trees_file.file != MODEL:
            self._drop_unreferenced()
            try:
                (self.rd / MODEL).unlink()
            except FileNotFoundError:
                pass

    def finish_model(self, ensemble) -> None:
        """Write the run's model: the trees not stored yet appended to the trees file, then the rest
        (binning, OOB results, header; ensemble: the run's Ensemble, its trees left out), and the
        file renamed model.npz. The trees are never copied: the final write adds only what is new."""
        from baggr.model import file
        self.wait()
        tr, tf = self.training, self.trees_file
        m = tr.next_member
        if m > tf.stored:
            tf.append(tr.kept(tf.stored, m), tf.stored, m)
        fault_kill("final", 1)
        arrays, header = file.rest(ensemble, file.trees_header(tr.kind, tr.n_out, [b - a for a, b in tf.parts]))
        tf.finish(arrays, header, before_rename=lambda: fault_kill("final", 2))

    def _kind(self) -> str:
        return self.training.kind

    def restore(self) -> bool:
        """Continue the training from the checkpoint on disk, if any; True when one was loaded."""
        path = self.rd / CHECKPOINT
        if not path.exists():
            self._drop_unreferenced()
            return False
        header, arrays = npzfile.read(path, "checkpoint file")
        check_checkpoint_header(path, header, "resume")
        tr = self.training
        # members may have grown since (resume --members N): every other setting must be the same
        if not _same_settings(header.get("config"), tr.config, but_members=True):
            raise ModelFileError(f"{path} belongs to other settings than {CONFIG}; it cannot be resumed")
        if header.get("sha256") not in (None, self.header_extra.get("sha256")):
            raise ModelFileError(f"{path} was made from other data than the run's data file")
        chunks = header.get("chunks") or []
        trees, expect = None, 0
        if tr.config.keep_members:
            if header.get("format_version") == 1:     # chunk files; the next checkpoint starts a trees file
                trees = self._load_chunks(chunks, tr.prep.codes.shape[0])
            else:
                self.trees_file = TreesFile(self.rd, header.get("trees"))
                trees = self.trees_file.read(tr.kind, tr.n_out, tr.prep.binning.is_cat)
                chunks = []
            expect = trees.members if trees is not None else 0
        if tr.config.keep_members and expect != int(header.get("next_member", -1)):
            raise ModelFileError(f"{path}: the stored trees hold {expect} members, the tallies "
                                 f"{header.get('next_member')}")
        tr.restore(arrays, header, trees)
        self.chunks, self.member = [list(c) for c in chunks], tr.next_member
        self.last_started = self.member
        self._drop_unreferenced()
        return True

    def from_model(self, model_name: str) -> None:
        """The training was continued from the run's model file (a finished run grown to more
        members): its first checkpoint stores all the trees in a new trees file (the model goes once
        that checkpoint is on disk)."""
        m = self.training.next_member
        self.trees_file = TreesFile(self.rd)
        self.chunks = []
        self.member = self.last_started = m
        self.t_last = float("-inf")   # a checkpoint is due after the first new member

    def stored_trees(self, upto: int):
        """The kept trees of members 0..upto-1 as the latest checkpoint stored them (a Compact or a Stack)."""
        tr = self.training
        trees = self.trees_file.read(tr.kind, tr.n_out, tr.prep.binning.is_cat)
        if trees is None or trees.members < upto:
            raise ModelFileError(f"{self.rd.path}: the trees file holds fewer than {upto} members")
        return trees.head(upto)

    def _load_chunks(self, chunks, n_features: int):
        """The trees a format-1 checkpoint's chunk files hold, as one Stack."""
        from baggr.model.compact import Compact, Stack
        parts, at = [], 0
        for c in chunks:
            f = self._chunk_trees(c, at, n_features)
            parts.append(f if isinstance(f, Compact) else Compact.from_forest(f, self._kind()))
            at = c[1]
        return Stack(parts) if parts else None

    def _chunk_trees(self, c, at: int, n_features: int):
        """The trees of one entry of the checkpoint's list (a chunk file, or the first members of
        the model a stop saved), checked against the list (the entry must start at member `at`)."""
        from baggr.model.forest import Forest
        if not (isinstance(c, list) and len(c) == 3 and c[0] == at and c[1] > c[0] and isinstance(c[2], str)
                and (c[2] == _chunk_name(c[0], c[1]) or (c[2] == MODEL and c[0] == 0))):
            raise ModelFileError(f"{self.rd / CHECKPOINT}: its list of member files is damaged")
        if c[2] == MODEL:   # the first c[1] members of the model a stop saved (fold_into_model)
            return self._model_members(c[1])
        h, a = npzfile.read(self.rd / c[2], "members file")
        if h.get("format") != CHUNK_FORMAT or h.get("first") != c[0] or h.get("last") != c[1]:
            raise ModelFileError(f"{self.rd / c[2]} is not the members file the checkpoint names")
        if h.get("format_version") == 1:
            forest = Forest(a)
            forest.validate(n_features, self.training.n_out)
        else:
            forest = self._compact_chunk(c[2], h, a)
        if forest.members != c[1] - c[0]:
            raise ModelFileError(f"{self.rd / c[2]} holds {forest.members} members, not {c[1] - c[0]}")
        return forest

    def _model_members(self, k: int) -> list:
        h, a = npzfile.read(self.rd / MODEL, "model file")
        if h.get("format") != "baggr-model" or h.get("format_version") != 2 or (h.get("trees") or {}).get("kind") != self._kind():
            raise ModelFileError(f"{self.rd / MODEL} is not the model the checkpoint takes its first {k} members from")
        compact = self._compact_chunk(MODEL, dict(h, format_version=CHUNK_VERSION, kind=self._kind()),
                                      {n[5:]: v for n, v in a.items() if n.startswith("tree_")})
        if compact.members < k:
            raise ModelFileError(f"{self.rd / MODEL} holds {compact.members} members, fewer than the checkpoint's {k}")
        return compact.head(k)

    def _compact_chunk(self, name: str, h: dict, a: dict):
        from baggr.model.compact import Compact
        if h.get("format_version") != CHUNK_VERSION or h.get("kind") != self._kind():
            raise ModelFileError(f"{self.rd / name} is not a members file this baggr reads for this run")
        compact = Compact(a, self._kind(), self.training.n_out)
        try:
            compact.validate(self.training.prep.binning.is_cat, self.training.n_out)
        except ModelFileError as e:
            raise ModelFileError(f"{self.rd / name}: {e}") from None
        return compact

    def _drop_unreferenced(self) -> None:
        """Remove what a killed job left half done: chunk files its checkpoint never named, temp files."""
        folder = self.rd / MEMBERS
        keep = {Path(c[2]).name for c in self.chunks} | ({Path(self.trees_file.file).name} if self.trees_file.parts else set())
        stale = list(self.rd.path.glob(".tmp-*"))
        if folder.is_dir():
            stale += [f for f in folder.iterdir() if f.name not in keep]
        for f in stale:
            try:
                f.unlink()
            except OSError:
                pass

    def remove(self) -> None:
        remove_checkpoint(self.rd)


def remove_checkpoint(rd: RunDir) -> None:
    """Drop the checkpoint and chunk files once model.npz holds everything."""
    for name in (CHECKPOINT, CHECKPOINT_INFO):
        try:
            (rd / name).unlink()
        except FileNotFoundError:
            pass
    shutil.rmtree(rd / MEMBERS, ignore_errors=True)


def read_checkpoint(rd: RunDir) -> tuple[dict, dict] | None:
    """(header, arrays) of the run's checkpoint, or None; a reader may call this while the job replaces it."""
    path = rd / CHECKPOINT
    if not path.exists():
        return None
    try:
        header, arrays = npzfile.read(path, "checkpoint file")
    except ModelFileError:
        if not path.exists():       # replaced or removed between the check and the read
            return None
        raise
    check_checkpoint_header(path, header, "read")
    return header, arrays


def check_checkpoint_header(path, header: dict, to: str) -> None:
    """Refuse a file that is not a baggr checkpoint or comes from a newer format; `to`: what the
    upgrade would let the user do ("resume", "read")."""
    if header.get("format") != CHECKPOINT_FORMAT:
        raise ModelFileError(f"{path} is not a baggr checkpoint")
    v = header.get("format_version")
    if not isinstance(v, int) or v > CHECKPOINT_VERSION:
        raise ModelFileError(f"{path} was written by a newer baggr (checkpoint format {v!r}; this baggr "
                             f"{__version__} reads up to {CHECKPOINT_VERSION}): upgrade baggr to {to} it")


def _same_settings(stored, config: Config, but_members: bool = False) -> bool:
    """Whether a checkpoint's settings are the run's: compared as Configs, so that a setting added
    since the checkpoint was written (at its default) does not count as a difference. but_members:
    the member count may differ (a run grown with resume --members N)."""
    if not isinstance(stored, dict):
        return False
    try:
        got = Config.from_dict(stored)
    except BaggrError:
        return False
    if but_members:
        got = got.replace(members=config.members)
    return got.to_dict() == config.to_dict()
