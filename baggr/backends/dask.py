"""Members grown on a Dask cluster (the optional extra: pip install 'baggr[cluster]').

The driver connects to a scheduler (an address; `local:N`, a process cluster of N workers on this
machine's loopback; or a Client the caller made), scatters the binned codes and targets once to every
worker (broadcast), submits chunks of members, keeps a bounded number of chunks in flight and hands
the results back in member order. Workers build the run's Grower once (dask_worker.py) and send back
each chunk's trees and OOB deltas packed in one buffer (dask_wire.py), pulled to the driver as soon as
the chunk is done while the main thread folds the ones before. A member is a pure function of m, so a
chunk lost with its worker is grown again elsewhere, and the fold, in member order, is the same as
with local threads.

Chunk size: one member per worker thread first; after every chunk, k = ceil(o / (OVERHEAD_SHARE * t)),
t the mean CPU time of a member in
its worker and o the cost of one chunk to the cluster: the larger of TASK_COST, the median wait of a
worker thread between two chunks, and the driver's time to submit one. Bounded by the members left per
worker thread (the last chunks spread over all workers) and by MAX_CHUNK_BYTES of results.
"""
from __future__ import annotations

import collections
import functools
import math
import statistics
import threading
import time
import uuid
from dataclasses import dataclass, field

from baggr.backends import dask_connect, dask_worker
from baggr.backends.base import Backend
from baggr.backends.dask_connect import one_line, parse_address, timeout_default  # noqa: F401
from baggr.backends.member import Grower
from baggr.errors import ClusterError, ClusterLostError

NO_WORKERS = 60.0                 # a run with no worker for this long (and at least TIMEOUT) stops
OVERHEAD_SHARE = 0.025            # the cluster's cost per chunk, as a share of the chunk's member time (half
                                  # the 5%: the driver pays more per chunk than the scheduler alone)
TASK_COST = 0.005                 # s: least CPU cost of one task, driver and worker (measured: bench/README.md)
MAX_CHUNK = 1024
MAX_CHUNK_BYTES = 64 << 20        # results of one chunk (trees and deltas) wait in a worker's memory
IN_FLIGHT_PER_THREAD = 3          # chunks submitted and not yet handed on, per worker thread
RESUBMITS = 3                     # a chunk whose future is cancelled (its data lost) is sent again
POLL = 1.0                        # s between checks of the connection while a chunk is awaited


@dataclass
class ClusterStats:
    """What the cluster did for one run (read by bench/cluster.py and the job's notes)."""

    address: str = ""
    threads: int = 0                  # worker threads when the run started
    ship_seconds: float = 0.0         # scattering the codes and targets to every worker
    ship_bytes: int = 0
    chunks: int = 0
    members: int = 0
    resubmitted: int = 0
    task_seconds: float = 0.0         # chunks' wall time in the workers
    task_cpu: float = 0.0             # chunks' CPU time in the workers' threads
    steady_cpu: float = 0.0           # the same, without the chunks that held a process's first member
    steady_members: int = 0
    member_seconds: float = 0.0       # members' own time (inside task_seconds)
    submit_seconds: float = 0.0       # the driver submitting chunks
    receive_seconds: float = 0.0      # chunks done travelling to the driver (transfer, unpickling), in _prefetch
    receives: int = 0                 # chunks received done
    result_bytes: int = 0             # the chunks' packed results (dask_wire.py)
    wall_seconds: float = 0.0         # first submit to last chunk received
    sizes: list = field(default_factory=list)      # members per chunk, in order
    gaps: list = field(default_factory=list)       # worker threads' waits between chunks of the run
    setup: dict = field(default_factory=dict)      # worker -> seconds building the Grower
    first: dict = field(default_factory=dict)      # worker -> its process's first member (kernels loaded)

    @property
    def efficiency(self) -> float:
        """Member time over worker-thread time: 1.0 when the workers never waited."""
        return self.member_seconds / (self.threads * self.wall_seconds) if self.threads and self.wall_seconds else 0.0


@dataclass
class _Chunk:
    a: int
    b: int
    future: object
    attempt: int = 0
    arrived: threading.Event = field(default_factory=threading.Event)   # _prefetch has run for future
    done: object = None          # its ChunkDone, pulled to the driver by _prefetch


class Dask(Backend):
    """Members grown by the workers of a Dask scheduler, handed back in member order.

    cluster: a scheduler address ("tcp://host:8786", "tls://..."), "local:N" (N worker processes on
    127.0.0.1, started here and stopped by shutdown()), or a distributed.Client the caller owns.
    timeout: seconds to reach the scheduler and see a first worker (default TIMEOUT or $BAGGR_CLUSTER_TIMEOUT).
    on_note: called with a line of text when something the user should know happens (workers lost...).
    """

    def __init__(self, cluster, *, timeout: float | None = None, on_note=None):
        self.timeout = timeout_default() if timeout is None else float(timeout)
        self.on_note = on_note
        self._inflight: collections.deque[_Chunk] = collections.deque()
        self._data = None
        self._token = None
        self._tokens: dict[int, tuple[Grower, str]] = {}    # id(grower) -> (grower, its token on the workers)
        self._grower: Grower | None = None
        self._bytes: int | None = None       # one member's results on the wire
        self.stats = ClusterStats()
        self.shipped = 0                     # times a table was shipped to the workers
        self.client, self._local, self._own_client = dask_connect.connect(cluster, self.timeout)
        self.address = self.client.scheduler.address
        self.option = cluster.strip() if isinstance(cluster, str) else None     # as the user gave it
        self.threads = self._threads()
        self._threads_at = time.monotonic()
        self._no_workers_since = None

    # -- connecting
    def _threads(self) -> int:
        return int(sum(self.client.nthreads().values()))

    def describe(self) -> dict:
        """Where the members grow, for a journal's start line: the option as given (local:N, an address;
        None for a caller's Client), the scheduler's address (without credentials), its workers and
        their threads."""
        try:
            workers = len(self.client.nthreads())
        except (OSError, TimeoutError):
            workers = None
        return {"cluster": dask_connect.shown_address(self.option or self.address),
                "cluster_address": dask_connect.shown_address(self.address),
                "cluster_workers": workers, "cluster_threads": self.threads}

    def _note(self, text: str) -> None:
        if self.on_note is not None:
            self.on_note(text)

    # -- growing
    def members(self, grower: Grower, start: int, stop: int):
        if start >= stop:
            return
        st = self.stats = ClusterStats(address=self.address, threads=self.threads)
        self._bytes = None
        try:
            self._switch(grower)
            t_first = time.perf_counter()
            inflight, nxt = self._inflight, start
            while nxt < stop or inflight:
                self._check_threads()
                # one member per worker thread until a first chunk says how long a member takes; then
                # chunks sized by it, IN_FLIGHT_PER_THREAD per thread
                limit = max(self.threads, 1) * (IN_FLIGHT_PER_THREAD if st.members else 1)
                while nxt < stop and len(inflight) < limit:
                    b = min(stop, nxt + self._chunk_size(stop - nxt))
                    inflight.append(self._submit(nxt, b))
                    nxt = b
                ch = inflight[0]
                done = self._receive(ch)
                inflight.popleft()
                st.wall_seconds = time.perf_counter() - t_first
                self._learn(ch, done)
                chunk, done.chunk = done.chunk, None
                for i in range(len(chunk)):
                    yield chunk.unpack(i)      # each member's arrays unpacked as it is folded
        except ClusterError:
            raise
        except OSError as e:     # TimeoutError is one: the run cannot go on here, but what it has is intact
            if self._lost(e):
                raise self._lost_error(e) from None
            raise ClusterLostError(f"the cluster at {self.address} failed ({type(e).__name__}: {one_line(e)})") from None

    def _switch(self, grower: Grower) -> None:
        """Make `grower` the one whose members are sent. Each grower (a run, or a comparison's candidate,
        which grows in blocks) keeps one token, under which the workers keep its Grower; the table is
        shipped again only for other data than the workers hold (a comparison's candidates share it)."""
        if self._grower is grower and self._data is not None:
            return
        token = self._tokens.get(id(grower))
        if token is None or token[0] is not grower:
            token = self._tokens[id(grower)] = (grower, uuid.uuid4().hex[:16])
        held = self._grower is not None and self._data is not None and self._data.status == "finished" \
            and self._grower.prep is grower.prep
        self._grower, self._token = grower, token[1]
        if not held:
            self._drop_data(keep=self._token)
            self._ship()

    def _ship(self) -> None:
        """Scatter the codes and targets (no names, labels, levels or edges) to every worker."""
        t0 = time.perf_counter()
        prep = self._grower.prep.for_workers()
        self._data = self.client.scatter(prep, broadcast=True, hash=False)
        self.shipped += 1
        self.stats.ship_seconds += time.perf_counter() - t0
        self.stats.ship_bytes = int(prep.codes.nbytes + prep.y_class.nbytes + prep.y_value.nbytes)

    def _submit(self, a: int, b: int, attempt: int = 0) -> _Chunk:
        t0 = time.perf_counter()
        fut = self.client.submit(dask_worker.grow_chunk, self._token, self._data, self._grower.config, a, b,
                                 key=f"baggr-members-{a}-{b}-{self._token}-{attempt}", retries=0,
                                 priority=1 if attempt else 0)
        ch = _Chunk(a, b, fut, attempt)
        fut.add_done_callback(functools.partial(self._prefetch, ch))
        self.stats.submit_seconds += time.perf_counter() - t0
        return ch

    def _prefetch(self, ch: _Chunk, fut) -> None:
        """In Dask's callback thread, once a chunk is done: its results travel to the driver now, while
        the main thread folds the chunks before it (else each would travel only when its turn came)."""
        try:
            if fut is ch.future and fut.status == "finished":
                t0 = time.perf_counter()
                ch.done = fut.result()
                self.stats.receive_seconds += time.perf_counter() - t0
                self.stats.receives += 1
        except BaseException:   # noqa: BLE001 - the main thread asks again, and tells what went wrong
            pass
        finally:
            if fut is ch.future:
                ch.arrived.set()

    def _receive(self, ch: _Chunk):
        """The chunk's results; a chunk cancelled while the scheduler lives is sent again."""
        from asyncio import CancelledError as LoopCancelled
        from concurrent.futures import CancelledError    # a cancelled future's (distributed's is one)

        from distributed.scheduler import KilledWorker
        while True:
            try:
                while not ch.arrived.wait(POLL):
                    self._check_threads()
                if ch.done is not None:
                    return ch.done
                return ch.future.result()     # the future's error, or (rarely) results _prefetch missed
            except KilledWorker as e:
                raise ClusterError(f"members {ch.a}..{ch.b - 1} were in hand on workers that died "
                                   f"({one_line(e)}); out of memory? see the workers' logs") from None
            except (Exception, LoopCancelled) as e:   # noqa: BLE001 - a grower's own error goes up as it is
                if self._lost(e):
                    raise self._lost_error(e) from None
                if not isinstance(e, (CancelledError, LoopCancelled)) or ch.attempt >= RESUBMITS:
                    raise
                # the chunk's future was dropped (e.g. every copy of the scattered data died with its workers)
                self.stats.resubmitted += 1
                self._note(f"members {ch.a}..{ch.b - 1} are grown again (lost with the workers that held "
                           f"them{' and the table' if self._data.status != 'finished' else ''})")
                if self._data.status != "finished":
                    self._ship()
                new = self._submit(ch.a, ch.b, ch.attempt + 1)
                ch.future, ch.attempt, ch.arrived, ch.done = new.future, new.attempt, new.arrived, None
                new.future.add_done_callback(functools.partial(self._prefetch, ch))

    def _learn(self, ch: _Chunk, done) -> None:
        st = self.stats
        st.chunks += 1
        st.members += ch.b - ch.a
        st.sizes.append(ch.b - ch.a)
        st.task_seconds += done.seconds
        st.task_cpu += done.cpu
        if done.first is None:     # a process's first member loads numba's kernels: not a member's time
            st.steady_cpu += done.cpu
            st.steady_members += ch.b - ch.a
        st.member_seconds += done.chunk.member_seconds
        if done.gap is not None:
            st.gaps.append(done.gap)
        if done.setup is not None:
            st.setup[done.worker] = done.setup
        if done.first is not None:
            st.first[done.worker] = done.first
        st.result_bytes += int(done.chunk.buf.nbytes)
        self._bytes = max(1, st.result_bytes // st.members)

    def _chunk_size(self, left: int) -> int:
        st = self.stats
        if not st.members:
            return 1
        # CPU time, not wall time: on a busy host a member's wall time grows with the wait for a core,
        # and so would the share the cluster's own work is allowed
        t = st.steady_cpu / st.steady_members if st.steady_members else st.task_cpu / st.members
        recent = st.gaps[-32:]
        o = max(TASK_COST, statistics.median(recent) if recent else 0.0, st.submit_seconds / max(st.chunks, 1))
        k = math.ceil(o / (OVERHEAD_SHARE * max(t, 1e-6)))
        per_thread = math.ceil(left / max(self.threads, 1))
        return max(1, min(k, MAX_CHUNK, MAX_CHUNK_BYTES // self._bytes, per_thread))

    # -- the cluster's health
    def _check_threads(self) -> None:
        """Refresh the worker threads now and then; a cluster without workers for long stops the run."""
        now = time.monotonic()
        if now - self._threads_at < POLL:
            return
        self._threads_at = now
        if self.client.status != "running":
            raise self._lost_error(None)
        try:
            n = self._threads()
        except OSError as e:
            raise self._lost_error(e) from None
        if n != self.threads:
            self._note(f"the cluster has {n} worker threads (was {self.threads})"
                       + ("; members in hand on the lost workers are grown again" if n < self.threads else ""))
            self.threads = n
        if n:
            self._no_workers_since = None
        elif self._no_workers_since is None:
            self._no_workers_since = now
        elif now - self._no_workers_since > max(NO_WORKERS, self.timeout):
            raise ClusterLostError(f"the Dask scheduler at {self.address} has had no workers for "
                                   f"{now - self._no_workers_since:.0f} s")

    def _lost(self, e: BaseException | None) -> bool:
        """Whether e says the scheduler is gone: the client noticed, the futures were cancelled for it, or a
        connection closed under a call (before the client noticed: its status changes a moment later)."""
        from distributed.comm.core import CommClosedError
        return self.client.status != "running" or getattr(e, "reason", None) == "scheduler-connection-lost" \
            or isinstance(e, CommClosedError)

    def _lost_error(self, e: BaseException | None) -> ClusterLostError:
        what = "the connection closed" if e is None or isinstance(e, OSError) \
            or getattr(e, "reason", None) == "scheduler-connection-lost" else one_line(e)
        return ClusterLostError(f"lost the Dask scheduler at {self.address} ({what})")

    # -- ending
    def close(self) -> None:
        """Cancel the chunks in flight. The shipped table and the workers' Growers stay for a next call
        of members() on the same data (a comparison's next block); release() or shutdown() drops them."""
        futures = [ch.future for ch in self._inflight]
        self._inflight.clear()
        if futures and self.client is not None and self.client.status == "running":
            try:
                self.client.cancel(futures)
            except (OSError, TimeoutError):
                pass   # the scheduler is going or gone

    def _drop_data(self, keep: str | None = None) -> None:
        """Drop the shipped table and the workers' Growers of every run sent so far but `keep` (a token)."""
        data, self._data = self._data, None
        tokens = [t for _, t in self._tokens.values() if t != keep]
        self._tokens = {k: v for k, v in self._tokens.items() if v[1] == keep}
        if self.client is None or self.client.status != "running":
            return
        try:
            if data is not None:
                data.release()
            if tokens:
                self.client.run(dask_worker.forget_all, tokens, on_error="ignore")
        except (OSError, TimeoutError):
            pass   # the scheduler is going or gone: its workers drop the runs with it

    def release(self) -> None:
        """close(), and drop the shipped table and the workers' Growers."""
        self.close()
        self._grower = self._token = None
        self._drop_data()

    def shutdown(self) -> None:
        """release(), then close the client and the local cluster this backend started (not a caller's client)."""
        self.release()
        dask_connect.close(self.client if self._own_client else None, self._local, self.timeout)
        self._own_client, self._local = False, None

    def __enter__(self) -> "Dask":
        return self

    def __exit__(self, *exc) -> None:
        self.shutdown()

