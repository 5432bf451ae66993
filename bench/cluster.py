"""R1 on a local Dask cluster against local threads, what the cluster costs, and a model for 100 workers.

    python bench/cluster.py [members] [rounds]
    python bench/cluster.py --cold      # the workers' first member on an empty numba cache

R1 (DESIGN.md): twonorm 100,000 x 20, full trees, features_per_split 4. Each round trains the same
configuration on threads=2 and on local:2 (two worker processes of one thread), one right after the
other in this process, and the figure is the median of the per-round ratios (this host's speed moves
between runs minutes apart); CPU time (this process and its children) is printed beside wall time,
since on a shared host it moves less. The cluster is started once; each run ships the codes again, as
every run does. Then: shipping, the cost per chunk, the workers' first member (numba loading its
kernels), Dask's own cost per task on this host, the driver's fold rate (members folded per second
when they arrive at once), the driver's memory over members, and the cost model for 100 workers
computed from these figures.
"""
import os
import pickle
import statistics
import sys
import time

import numpy as np
import psutil

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
from bench.util import mib, twonorm  # noqa: E402
from baggr.backends.base import Backend  # noqa: E402
from baggr.backends.dask import Dask  # noqa: E402
from baggr.backends.dask_wire import WireChunk  # noqa: E402
from baggr.config import Config  # noqa: E402
from baggr.engine import Training  # noqa: E402


def cpu_seconds() -> tuple[float, float]:
    """CPU time (user + system) of this process (driver, scheduler, nannies) and of its children (the
    local cluster's worker processes)."""
    own = psutil.Process().cpu_times()
    kids = 0.0
    for p in psutil.Process().children(recursive=True):
        try:
            t = p.cpu_times()
        except psutil.NoSuchProcess:
            continue
        kids += t.user + t.system
    return own.user + own.system, kids


def run(X, y, cfg, backend=None, every=0):
    """(seconds, ensemble, [(member, rss)]) of one training; rss sampled every `every` members."""
    proc, rss = psutil.Process(), []

    def on_member(ev):
        if every and (ev.member % every == 0 or ev.member == 1):
            rss.append((ev.member, proc.memory_info().rss))

    t0 = time.perf_counter()
    ens = Training(X, y, cfg).run(backend=backend, on_member=on_member)
    return time.perf_counter() - t0, ens, rss


class Replay(Backend):
    """Hands back members grown beforehand: what the driver's fold costs when members arrive at once."""

    def __init__(self, results):
        self.results = results

    def members(self, grower, start, stop):
        yield from self.results[start:stop]


def empty(i):
    return i


def sized(i, nbytes):
    return np.ones(nbytes, np.uint8)


def per_task(client, fn, n, *args):
    """(driver CPU, workers' CPU, wall) per task for n tasks of fn, submitted at once."""
    c0, t0 = cpu_seconds(), time.perf_counter()
    futures = [client.submit(fn, i, *args, pure=False) for i in range(n)]
    for f in futures:
        f.result()
    del futures
    c1, t1 = cpu_seconds(), time.perf_counter()
    return (c1[0] - c0[0]) / n, (c1[1] - c0[1]) / n, (t1 - t0) / n


def cold():
    """Workers on an empty numba cache: the first compiles the kernels, the other waits its turn and loads."""
    import tempfile
    X, y = twonorm(100_000, seed=1)
    with tempfile.TemporaryDirectory(prefix="baggr-numba-") as d:
        os.environ["NUMBA_CACHE_DIR"] = d          # the workers inherit it; this process's numba is loaded
        cluster = Dask("local:2", timeout=120)
        t0 = time.perf_counter()
        run(X, y, Config(members=8, features_per_split=4, seed=1), backend=cluster)
        st = cluster.stats
        print(f"cold numba cache ({d}): 8 members in {time.perf_counter() - t0:.1f} s; each worker process's "
              f"first member: " + ", ".join(f"{v:.1f} s" for v in sorted(st.first.values())))
        cluster.shutdown()


def main():
    if sys.argv[1:2] == ["--cold"]:
        return cold()
    members = int(sys.argv[1]) if len(sys.argv) > 1 else 96
    rounds = int(sys.argv[2]) if len(sys.argv) > 2 else 5
    X, y = twonorm(100_000, seed=1)
    cfg = Config(members=members, features_per_split=4, seed=1, threads=2)
    print(f"R1 twonorm 100,000 x 20, {members} members, features_per_split 4, full trees; {rounds} rounds; "
          f"load average {os.getloadavg()[0]:.1f}")
    run(X, y, cfg.replace(members=4))                       # kernels loaded in the driver
    t0 = time.perf_counter()
    cluster = Dask("local:2", timeout=120)
    print(f"local:2 started in {time.perf_counter() - t0:.2f} s ({cluster.address}, {cluster.threads} worker threads)")

    # -- 1. local:2 against threads=2
    ratios, cpu_ratios, rows, fold_keep = [], [], [], []
    for r in range(rounds):
        c0 = cpu_seconds()
        tt, a, _ = run(X, y, cfg)
        c1 = cpu_seconds()
        td, b, _ = run(X, y, cfg, backend=cluster)
        c2 = cpu_seconds()
        same = all(np.array_equal(v, b.oob.arrays()[k]) for k, v in a.oob.arrays().items()) and \
            all(np.array_equal(v, b.forest.arrays[k]) for k, v in a.forest.arrays.items())
        st = cluster.stats
        ratios.append(td / tt)
        cpu_ratios.append((sum(c2) - sum(c1)) / (sum(c1) - sum(c0)))
        rows.append(st)
        fold_keep.append((b.stats["fold_seconds"] + b.stats["keep_seconds"]) / members)
        print(f"round {r + 1}: threads=2 {tt:.2f} s ({members / tt:.1f} members/s), local:2 {td:.2f} s "
              f"({members / td:.1f} members/s), ratio {td / tt:.3f}, bit-identical {same}; "
              f"chunks {st.chunks} (sizes {min(st.sizes)}..{max(st.sizes)}, median {statistics.median(st.sizes)}), "
              f"efficiency {st.efficiency:.3f}, resubmitted {st.resubmitted}; CPU {sum(c1) - sum(c0):.2f} s against "
              f"{c2[0] - c1[0]:.2f} s in the driver + {c2[1] - c1[1]:.2f} s in the workers")
    print(f"local:2 against threads=2, wall: median ratio {statistics.median(ratios):.3f} "
          f"(range {min(ratios):.3f}-{max(ratios):.3f}); CPU (driver, scheduler and workers against the one "
          f"process): median ratio {statistics.median(cpu_ratios):.3f} (range {min(cpu_ratios):.3f}-{max(cpu_ratios):.3f})")

    # -- 2. what one run on the cluster cost
    ship = statistics.median([s.ship_seconds for s in rows])
    print(f"shipping the codes and targets ({mib(rows[0].ship_bytes)}) to 2 workers: median {1e3 * ship:.1f} ms")
    gaps = [g for s in rows for g in s.gaps]
    t_m = statistics.median([s.member_seconds / s.members for s in rows])
    t_cpu = statistics.median([s.task_cpu / s.members for s in rows])
    recv = statistics.median([s.receive_seconds / max(s.receives, 1) for s in rows])
    chunk = statistics.median([statistics.median(s.sizes) for s in rows])
    print(f"member time in a worker: median {1e3 * t_m:.1f} ms wall, {1e3 * t_cpu:.1f} ms CPU; a chunk's wall in the worker over its members' "
          f"{statistics.median([s.task_seconds / s.member_seconds for s in rows]):.3f}")
    print(f"cost per chunk: a worker thread's wait between two chunks median {1e3 * statistics.median(gaps):.2f} ms "
          f"(p90 {1e3 * np.percentile(gaps, 90):.2f} ms, {len(gaps)} waits); submitting "
          f"{1e3 * statistics.median([s.submit_seconds / s.chunks for s in rows]):.2f} ms; pulling a done chunk to "
          f"the driver (wall, in Dask's callback thread while the main thread folds) {1e3 * recv:.2f} ms "
          f"(median chunk {chunk} members); results on the wire "
          f"{statistics.median([s.result_bytes / s.members for s in rows]) / 1e6:.3f} MB a member")
    setup = [v for s in rows for v in s.setup.values()]
    first = [v for s in rows for v in s.first.values()]
    print(f"a worker's Grower, built once per run: median {1e3 * statistics.median(setup):.2f} ms "
          f"({len(setup)} builds for {rounds} runs x {cluster.threads} workers)")
    print(f"a worker process's first member (numba loads its cached kernels, one process at a time): "
          f"{', '.join(f'{v:.2f} s' for v in first)}, against {1e3 * t_m:.1f} ms later")

    # -- 3. the driver's fold rate: members grown beforehand, folded (and kept) as fast as they come
    tr = Training(X, y, cfg.replace(members=64))
    grown = tr.grower.grow_chunk(range(64))
    tr.grower.release()
    t0 = time.process_time()
    packed = [WireChunk.pack([r], tr.prep.n_rows) for r in grown]
    pack = (time.process_time() - t0) / len(grown)
    blobs = [pickle.dumps(c, protocol=5) for c in packed]
    result_bytes = int(statistics.median([len(b) for b in blobs]))
    t0 = time.process_time()
    for b in blobs:
        pickle.loads(b).unpack(0)
    unpickle = (time.process_time() - t0) / len(blobs)
    fold_rates = []
    for keep in (True, False):
        c = cfg.replace(members=64, keep_members=keep)
        results = grown if keep else [type(r)(r.member, None, r.delta, r.visits, r.nodes, r.seconds) for r in grown]
        replay = Training(X, y, c)          # binning the table is not the fold's
        t0 = time.process_time()            # CPU: the fold runs in this thread alone
        replay.run(backend=Replay(results))
        fold_rates.append((time.process_time() - t0) / 64)
    print(f"driver fold rate, CPU (64 R1 members handed over at once): kept {1 / fold_rates[0]:.0f} members/s "
          f"({1e3 * fold_rates[0]:.2f} ms each), estimate-only {1 / fold_rates[1]:.0f} members/s "
          f"({1e3 * fold_rates[1]:.2f} ms); packing one member's results in a worker {1e3 * pack:.2f} ms CPU, "
          f"unpickling and unpacking them in the driver ({result_bytes / 1e6:.2f} MB, "
          f"{len(pickle.dumps(grown[0], protocol=5)) / 1e6:.2f} MB as its arrays are) "
          f"{1e3 * unpickle:.2f} ms; fold + keep inside the cluster runs {1e3 * statistics.median(fold_keep):.2f} ms")

    # -- 4. Dask's own cost per task on this host, and per byte of results
    client = cluster.client
    per_task(client, empty, 50)
    d0, w0, wall0 = per_task(client, empty, 400)
    d1, w1, wall1 = per_task(client, sized, 200, result_bytes)
    print(f"Dask per task (400 empty tasks): driver+scheduler CPU {1e3 * d0:.2f} ms, workers' CPU {1e3 * w0:.2f} ms, "
          f"wall {1e3 * wall0:.2f} ms; a task returning {result_bytes / 1e6:.2f} MB (one R1 member's results): "
          f"{1e3 * d1:.2f} / {1e3 * w1:.2f} / {1e3 * wall1:.2f} ms")

    # -- 5. driver memory over members: estimate-only (nothing kept grows) and kept
    for keep in (False, True):
        n = 4 * members
        every = max(1, n // 8)
        _, _, rss = run(X, y, cfg.replace(members=n, keep_members=keep), backend=cluster, every=every)
        base = rss[0][1]
        print(f"driver RSS, {'kept' if keep else 'estimate-only'} {n} members (above member 1 at {mib(base)}): "
              + ", ".join(f"{m}: +{(v - base) / 2**20:.1f}" for m, v in rss) + " MiB")
    cluster.shutdown()

    # -- 6. on paper: 100 workers of one thread each on R1
    W, link = 100, 1.25e9                        # workers; a 10 Gbit/s link, bytes/s
    d_member = fold_rates[0] + (d1 - d0) + unpickle   # driver per member: fold + keep, receiving and unpacking its bytes
    d_chunk = d0                                 # driver and scheduler per task
    w_chunk = w0                                 # a worker's own cost per task
    t_m = t_cpu                                  # CPU throughout: the host's load inflates wall times unevenly
    print(f"\nmodel, CPU figures, {W} workers x 1 thread on R1 (member {1e3 * t_m:.1f} ms in a worker; per member in the driver "
          f"{1e3 * d_member:.2f} ms; per chunk {1e3 * d_chunk:.2f} ms in the driver and scheduler, "
          f"{1e3 * w_chunk:.2f} ms in a worker; {result_bytes / 1e6:.2f} MB of results per member):")
    print("  k    workers/s   scheduler+driver/s   driver link/s   members/s (the least)")
    for k in (1, 2, 4, 8, 16, 64, 256):
        workers = W * k / (k * t_m + w_chunk)
        driver = k / (k * d_member + d_chunk)
        network = link / result_bytes
        print(f"  {k:<4d} {workers:10.0f}   {driver:18.0f}   {network:13.0f}   {min(workers, driver, network):10.0f}")
    print(f"  the driver is the bottleneck beyond about {t_m / d_member:.0f} worker threads (member time over the "
          f"driver's time per member)")
    S = 100e6 * 100                              # a 100M x 100 table: one byte per cell
    rounds_ = int(np.ceil(np.log(W) / np.log(3)))
    print(f"  broadcast of R1's codes to {W} workers: {(2 + 2 * rounds_) * rows[0].ship_bytes / link * 1e3:.0f} ms "
          f"(client -> scheduler -> a worker, then {rounds_} rounds in which every holder sends to two more); "
          f"a 100M x 100 table: {(2 + 2 * rounds_) * S / link:.0f} s")


if __name__ == "__main__":
    main()
