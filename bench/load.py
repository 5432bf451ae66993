"""Opening a large model file: seconds to load (map, checksum, check every slot) and to score a few rows.

The model is P1's trees (twonorm 30,000 x 20, full trees, hard votes) repeated until the file
reaches the size asked for (GiB; default 2): a real layout at a real size without hours of
training. Loads run in fresh processes; "warm" has the file in the page cache (just written),
"cold" drops the cache first where this process may (root on Linux), else says it could not.
parts: the trees stored in that many parts, as a run that checkpointed that often writes them.
    python bench/load.py [GiB] [parts] [folder]
"""
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

import baggr
from baggr.model.compact import Compact, Stack
from baggr.model.ensemble import Ensemble
from util import twonorm

LOAD = """
import sys, time, resource
t0 = time.perf_counter()
import numpy as np, baggr
t1 = time.perf_counter()
u0 = resource.getrusage(resource.RUSAGE_SELF)
ens = baggr.load(sys.argv[1])
t2 = time.perf_counter()
u1 = resource.getrusage(resource.RUSAGE_SELF)
cpu = (u1.ru_utime - u0.ru_utime) + (u1.ru_stime - u0.ru_stime)
rng = np.random.default_rng(0)
X = rng.normal(size=(64, 20))
ens.vote_shares(X, threads=2)
t3 = time.perf_counter()
rss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**10
print(f"{t2 - t1:.2f} {t3 - t2:.2f} {rss:.0f} {ens.forest.members} {cpu:.2f}")
"""


def tiled(ens: Ensemble, copies: int, parts: int = 1) -> Ensemble:
    if parts > 1:
        each = [tiled(ens, copies // parts + (p < copies % parts)).compact for p in range(parts)]
        return Ensemble(ens.schema, ens.binning, ens.config, Stack(each), ens.oob, ens.stats)
    a = ens.compact.arrays
    m = a["offset"].shape[0] - 1
    reps = {"nodes": np.tile(a["nodes"], copies), "leaves": np.tile(a["leaves"], copies), "shares": a["shares"]}
    for name, total in (("offset", a["nodes"].shape[0]), ("leaf_offset", a["leaves"].shape[0])):
        off = a[name]
        reps[name] = np.concatenate([off[:-1] + k * total for k in range(copies)] + [[copies * total]]).astype(np.int64)
    assert reps["offset"].shape[0] == m * copies + 1
    return Ensemble(ens.schema, ens.binning, ens.config, Compact(reps, ens.compact.kind, ens.compact.n_out),
                    ens.oob, ens.stats)


def drop_caches() -> bool:
    try:
        os.sync()
        Path("/proc/sys/vm/drop_caches").write_text("3\n")
        return True
    except OSError:
        return False


def main(gib=2.0, parts=1, folder=None):
    X, y = twonorm(30_000, seed=1)
    ens = baggr.train(X, y, baggr.Config(members=300, seed=1))
    per_copy = ens.compact.nbytes
    copies = max(1, int(gib * 2**30 / per_copy))
    big = tiled(ens, copies, int(parts))
    with tempfile.TemporaryDirectory(dir=folder) as tmp:
        path = Path(tmp) / "big.npz"
        t0 = time.perf_counter()
        big.save(path)
        t_save = time.perf_counter() - t0
        size = path.stat().st_size
        nodes = ens.compact.n_nodes * copies
        print(f"{time.strftime('%Y-%m-%d %H:%M')} model of {big.forest.members:,} members in {int(parts)} "
              f"part(s), {nodes:,} nodes: "
              f"{size / 2**30:.2f} GiB ({size / nodes:.2f} B/node), saved in {t_save:.1f} s")
        del big
        print(f"  load average {os.getloadavg()[0]:.1f}")
        for what in ("warm", "warm", "cold"):
            if what == "cold" and not drop_caches():
                print("  cold: cannot drop the page cache here (needs root); not measured")
                continue
            out = subprocess.run([sys.executable, "-c", LOAD, str(path)], capture_output=True, text=True, check=True)
            load_s, score_s, rss, members, cpu = out.stdout.split()
            print(f"  {what}: load {load_s} s ({cpu} CPU s; map, checksum, check every slot), then 64 rows through all "
                  f"{int(members):,} members {score_s} s; peak RSS {rss} MiB")


if __name__ == "__main__":
    main(*(float(a) if i == 0 else int(a) if i == 1 else a for i, a in enumerate(sys.argv[1:])))
