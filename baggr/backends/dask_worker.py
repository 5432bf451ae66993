"""What runs inside a Dask worker: one Grower per run, cached in the worker process under the run's
token, and the chunks of members grown with it.

A worker process builds the Grower of a run once (its first chunk of that run) and keeps it for the
run's later chunks, so the kernels, the per-thread working arrays and the draw tables are set up once
per worker, not once per chunk. The process's first member runs under a lock shared by the processes
of one machine: numba loads (or, on a cold cache, compiles and writes) its kernels there, and
several processes writing one cache at once can crash.
"""
from __future__ import annotations

import collections
import os
import socket
import tempfile
import threading
import time
from dataclasses import dataclass

from baggr.backends.dask_wire import WireChunk
from baggr.backends.member import Grower, MemberResult
from baggr.config import Config
from baggr.data.prepared import Prepared

KEEP_RUNS = 8   # Growers kept per worker process: the run in hand and the ones before (a comparison's candidates)

_growers: collections.OrderedDict[str, Grower] = collections.OrderedDict()
_lock = threading.Lock()
_warm = False                       # this process has grown a member: its kernels are loaded
_last_end: dict[int, tuple[str, float]] = {}   # worker thread -> (run token, end of its latest chunk)


@dataclass
class ChunkDone:
    """A grown chunk on its way back: the members' results and how the worker spent its time."""

    chunk: WireChunk          # the members' results, packed
    seconds: float            # the chunk's wall time in the worker
    cpu: float                # the chunk's CPU time in its worker thread (below the wall time on a busy host)
    gap: float | None         # this worker thread's wait since its previous chunk of the same run
    setup: float | None       # building the run's Grower, when this chunk did it
    first: float | None       # the process's first member (numba loading or compiling its kernels)
    worker: str               # host:pid of the worker process


def grow_chunk(token: str, prep: Prepared, config: Config, a: int, b: int) -> ChunkDone:
    """Members a..b-1 of the run `token` (prep: the scattered codes and targets, config: its settings)."""
    global _warm
    t_in, c_in = time.perf_counter(), time.thread_time()
    tid = threading.get_ident()
    last = _last_end.get(tid)
    gap = t_in - last[1] if last is not None and last[0] == token else None
    grower, setup = _grower(token, prep, config)
    results: list[MemberResult] = []
    first = None
    if not _warm:
        with _machine_lock():
            results.append(grower.grow_member(a))
        first, _warm = results[0].seconds, True
    results.extend(grower.grow_chunk(range(a + len(results), b)))
    chunk = WireChunk.pack(results, prep.n_rows)
    t_out = time.perf_counter()
    _last_end[tid] = (token, t_out)
    return ChunkDone(chunk, t_out - t_in, time.thread_time() - c_in, gap, setup, first,
                     f"{socket.gethostname()}:{os.getpid()}")


def _grower(token: str, prep: Prepared, config: Config) -> tuple[Grower, float | None]:
    with _lock:
        g = _growers.get(token)
        if g is not None:
            _growers.move_to_end(token)
            return g, None
        t0 = time.perf_counter()
        g = _growers[token] = Grower(prep, config)
        while len(_growers) > KEEP_RUNS:
            _growers.popitem(last=False)[1].release()
        return g, time.perf_counter() - t0


def forget(token: str) -> bool:
    """Drop a finished run's Grower (and the working arrays it holds); True if this worker had one."""
    with _lock:
        g = _growers.pop(token, None)
    if g is not None:
        g.release()
    return g is not None


def forget_all(tokens: list[str]) -> int:
    """forget() each run of tokens; how many this worker had."""
    return sum(forget(t) for t in tokens)


def versions() -> dict:
    """What decides a member's bits on this worker: the versions of baggr, numpy, numba and Python."""
    import platform

    import numba
    import numpy

    from baggr.version import __version__
    return {"baggr": __version__, "numpy": numpy.__version__, "numba": numba.__version__,
            "python": platform.python_version()}


class _machine_lock:
    """An exclusive lock shared by this user's processes on this machine (flock on a temp file)."""

    def __enter__(self):
        import fcntl
        path = os.path.join(tempfile.gettempdir(), f"baggr-kernels-{os.getuid()}.lock")
        self.fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o600)
        fcntl.flock(self.fd, fcntl.LOCK_EX)
        return self

    def __exit__(self, *exc):
        import fcntl
        fcntl.flock(self.fd, fcntl.LOCK_UN)
        os.close(self.fd)
