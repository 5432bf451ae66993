"""R1 on a local Dask cluster against local threads, and what the cluster costs.

    python bench/cluster.py [members] [rounds]

R1 (DESIGN.md): twonorm 100,000 x 20, full trees, features_per_split 4. Each round trains the same
configuration on threads=2 and on local:2 (two worker processes of one thread), one right after the
other in this process, and the figure is the median of the per-round ratios (this host's speed moves
between runs minutes apart). The cluster is started once, before the rounds; each run on it ships
the codes again, as every run does. Then: shipping time, the cost per chunk, the workers' first
member (numba loading its kernels), and the driver's resident memory over the members of an
estimate-only run and of a kept one.
"""
import os
import statistics
import sys
import time

import numpy as np
import psutil

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), ".."))
from bench.util import mib, twonorm  # noqa: E402
from baggr.backends.dask import Dask  # noqa: E402
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


def main():
    members = int(sys.argv[1]) if len(sys.argv) > 1 else 96
    rounds = int(sys.argv[2]) if len(sys.argv) > 2 else 5
    X, y = twonorm(100_000, seed=1)
    cfg = Config(members=members, features_per_split=4, seed=1, threads=2)
    print(f"R1 twonorm 100,000 x 20, {members} members, features_per_split 4, full trees; {rounds} rounds")
    run(X, y, cfg.replace(members=4))                       # kernels loaded in the driver
    t0 = time.perf_counter()
    cluster = Dask("local:2", timeout=120)
    print(f"local:2 started in {time.perf_counter() - t0:.2f} s ({cluster.address}, {cluster.threads} worker threads)")
    ratios, cpu_ratios, rows = [], [], []
    for r in range(rounds):
        c0 = cpu_seconds()
        tt, a, _ = run(X, y, cfg)
        c1 = cpu_seconds()
        td, b, _ = run(X, y, cfg, backend=cluster)
        c2 = cpu_seconds()
        cpu_ratios.append((sum(c2) - sum(c1)) / (sum(c1) - sum(c0)))
        same = all(np.array_equal(v, b.oob.arrays()[k]) for k, v in a.oob.arrays().items()) and \
            all(np.array_equal(v, b.forest.arrays[k]) for k, v in a.forest.arrays.items())
        st = cluster.stats
        ratios.append(td / tt)
        rows.append(st)
        print(f"round {r + 1}: threads=2 {tt:.2f} s ({members / tt:.1f} members/s), local:2 {td:.2f} s "
              f"({members / td:.1f} members/s), ratio {td / tt:.3f}, bit-identical {same}; "
              f"chunks {st.chunks} (sizes {min(st.sizes)}..{max(st.sizes)}, median {statistics.median(st.sizes)}), "
              f"efficiency {st.efficiency:.3f}, resubmitted {st.resubmitted}; CPU {sum(c1) - sum(c0):.2f} s against "
              f"{c2[0] - c1[0]:.2f} s in the driver + {c2[1] - c1[1]:.2f} s in the workers")
    print(f"local:2 against threads=2: median ratio {statistics.median(ratios):.3f} "
          f"(range {min(ratios):.3f}-{max(ratios):.3f}); overhead {100 * (statistics.median(ratios) - 1):.1f}%")
    print(f"CPU of local:2 (driver, scheduler, workers) against threads=2: median ratio "
          f"{statistics.median(cpu_ratios):.3f} (range {min(cpu_ratios):.3f}-{max(cpu_ratios):.3f})")
    ship = [s.ship_seconds for s in rows]
    print(f"shipping the codes and targets ({mib(rows[0].ship_bytes)}) to 2 workers: median {1e3 * statistics.median(ship):.1f} ms")
    gaps = [g for s in rows for g in s.gaps]
    per_member = statistics.median([s.member_seconds / s.members for s in rows])
    print(f"member time in the workers: median {1e3 * per_member:.1f} ms; task wall over member time "
          f"{statistics.median([s.task_seconds / s.member_seconds for s in rows]):.3f}")
    print(f"cost per chunk: worker thread's wait between chunks median {1e3 * statistics.median(gaps):.2f} ms "
          f"(p90 {1e3 * np.percentile(gaps, 90):.2f} ms, {len(gaps)} waits); driver submit "
          f"{1e3 * statistics.median([s.submit_seconds / s.chunks for s in rows]):.2f} ms; driver receive of a done chunk "
          f"{1e3 * statistics.median([s.receive_seconds / max(s.receives, 1) for s in rows]):.2f} ms "
          f"(median chunk {statistics.median([statistics.median(s.sizes) for s in rows])} members)")
    setup = [v for s in rows for v in s.setup.values()]
    first = [v for s in rows for v in s.first.values()]
    print(f"worker Grower built once per run per worker: median {1e3 * statistics.median(setup):.2f} ms "
          f"({len(setup)} builds over {rounds} runs x {cluster.threads} workers)")
    print(f"a worker process's first member (numba loads its cached kernels, under the machine lock): "
          f"{', '.join(f'{v:.2f} s' for v in first)} against {1e3 * per_member:.1f} ms later")

    # driver memory over members: estimate-only (nothing kept grows) and kept
    for keep in (False, True):
        n = 4 * members
        every = max(1, n // 8)
        _, _, rss = run(X, y, cfg.replace(members=n, keep_members=keep), backend=cluster, every=every)
        base = rss[0][1]
        print(f"driver RSS, {'kept' if keep else 'estimate-only'} {n} members (above member 1 at {mib(base)}): "
              + ", ".join(f"{m}: +{(v - base) / 2**20:.1f}" for m, v in rss) + " MiB")
    cluster.shutdown()


if __name__ == "__main__":
    main()
