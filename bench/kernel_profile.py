"""Where a tree's time goes, by compiled function: perf samples of trees grown on R1 or R3.

    python bench/kernel_profile.py [r1|r3] [trees]

Needs Linux `perf` (software clock events are enough: no hardware counters on a VM). The script
starts itself as a child that compiles the kernels afresh (an empty numba cache, so that their
machine code is at hand), writes /tmp/perf-PID.map naming each compiled function's address range
(perf's format for code generated at run time) and waits; `perf record` then attaches to it for
the trees alone. Prints each function's share of the samples that fell in compiled code and in the
runtime helpers it calls (reference counts, memset, memmove); the rest (Python, numpy) below that.
Helpers inlined into grow_nodes count as grow_nodes.
"""
import gc
import os
import re
import subprocess
import sys
import tempfile
import time

HERE = os.path.dirname(os.path.abspath(__file__))


def write_perf_map(modules) -> int:
    """Name the address range of every compiled function of the dispatchers in `modules`."""
    from numba.core.registry import CPUDispatcher
    entries = {}
    for mod in modules:
        for obj in vars(mod).values():
            if not isinstance(obj, CPUDispatcher):
                continue
            for cres in obj.overloads.values():
                lib = cres.library
                for fn in lib._final_module.functions:  # numba internals: fine for a bench tool
                    if fn.is_declaration:
                        continue
                    addr = lib.get_pointer_to_function(fn.name)
                    if addr:
                        entries[addr] = fn.name
    starts = sorted(entries)
    with open(f"/tmp/perf-{os.getpid()}.map", "w") as fh:
        for i, a in enumerate(starts):
            size = min((starts[i + 1] - a) if i + 1 < len(starts) else 4096, 1 << 20)
            fh.write(f"{a:x} {size:x} {entries[a]}\n")
    return len(starts)


def child(problem: str, trees: int) -> None:
    sys.path.insert(0, os.path.join(HERE, ".."))
    import numpy as np

    from baggr.learn import hist_kernels, partition_kernels, split_kernels, tree_kernels
    from baggr.learn.rng import STREAM_TREE, stream_state
    from baggr.learn.tree import Learner
    from tree_speed import bootstrap, quantile_codes, twonorm
    from util import friedman1

    if problem == "r3":
        x, yv = friedman1(100_000, seed=1)
        codes, n_bins = quantile_codes(x)
        learner = Learner.make(codes, n_bins, np.zeros(10, np.uint8), np.zeros(1), yv, task="regression",
                               n_classes=1, criterion="variance", features_per_split=3, min_leaf=1, depth_limit=None)
        oob = "value"
    else:
        x, y = twonorm(100_000)
        codes, n_bins = quantile_codes(x)
        learner = Learner.make(codes, n_bins, np.zeros(20, np.uint8), y, np.zeros(1), task="classes", n_classes=2,
                               criterion="gini", features_per_split=4, min_leaf=1, depth_limit=None)
        oob = "class"
    scratch = learner.scratch(keep=True)
    draws = [bootstrap(100_000, m) for m in range(min(trees, 20) + 1)]

    def one(m):
        w = scratch.weights
        w[:] = draws[m % len(draws)]
        learner.grow(w, stream_state(7, m, STREAM_TREE), oob=oob, scratch=scratch)

    one(0)  # compile
    n = write_perf_map([tree_kernels, hist_kernels, split_kernels, partition_kernels])
    # compiling afresh leaves millions of objects behind: out of the collector's way, or its passes
    # over them take a quarter of the samples
    gc.collect()
    gc.freeze()
    print("ready", flush=True)
    sys.stdin.readline()  # the profiler is attached
    t0 = time.perf_counter()
    for m in range(1, trees + 1):
        one(m)
    print(f"{problem}: {trees} trees, {(time.perf_counter() - t0) / trees * 1e3:.1f} ms a tree; {n} compiled functions mapped")


def short(symbol: str) -> str:
    """baggr's mangled names carry module and function: ..._kernels11grow_kernelB2v1... -> tree_kernels.grow_kernel"""
    m = re.search(r"5baggr\d+([a-z_]+)\d+([a-z_0-9]+?)B\d", symbol)
    return f"{m.group(1)}.{m.group(2)}" if m else symbol[:60]


def main():
    problem = sys.argv[1] if len(sys.argv) > 1 else "r1"
    trees = sys.argv[2] if len(sys.argv) > 2 else "40"
    if problem not in ("r1", "r3") or not trees.isdigit() or int(trees) < 1:
        sys.exit("usage: python bench/kernel_profile.py [r1|r3] [trees >= 1]")
    trees = int(trees)
    if os.environ.get("BAGGR_PROFILE_CHILD"):
        return child(problem, trees)
    with tempfile.TemporaryDirectory() as tmp:
        data = os.path.join(tmp, "perf.data")
        env = dict(os.environ, BAGGR_PROFILE_CHILD="1", NUMBA_CACHE_DIR=os.path.join(tmp, "cache"))
        kid = subprocess.Popen([sys.executable, os.path.abspath(__file__), problem, str(trees)], env=env,
                               stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
        if kid.stdout.readline().strip() != "ready":
            sys.exit(f"kernel_profile: the profiled run failed (exit {kid.wait()})")
        try:
            perf = subprocess.Popen(["perf", "record", "-q", "-e", "cpu-clock", "-F", "4000", "-o", data,
                                     "-p", str(kid.pid)], stderr=subprocess.DEVNULL)
        except FileNotFoundError:
            kid.kill()
            sys.exit("kernel_profile: needs Linux perf (apt-get install linux-perf)")
        time.sleep(1.0)  # perf attaches
        kid.stdin.write("go\n")
        kid.stdin.flush()
        print(kid.stdout.read().strip())
        kid.wait()
        perf.wait()
        report = subprocess.run(["perf", "report", "-i", data, "--sort", "sym", "--stdio"], capture_output=True,
                                text=True, check=True).stdout
        os.unlink(f"/tmp/perf-{kid.pid}.map")
    rows, other = [], 0.0
    for line in report.splitlines():
        m = re.match(r"\s+([\d.]+)%\s+\S+\s+(\S+)", line)
        if not m:
            continue
        if ("baggr" in m.group(2) or m.group(2).startswith(("NRT_", "__mem"))) and "cpython" not in m.group(2):
            rows.append((float(m.group(1)), short(m.group(2))))
        else:
            other += float(m.group(1))
    total = sum(p for p, _ in rows)
    print(f"share of the samples ({total:.0f}% in compiled code and its runtime helpers, {other:.0f}% elsewhere):")
    for p, name in rows:
        if p >= 0.2:
            print(f"  {p:5.1f}%  {name}")

if __name__ == "__main__":
    main()
