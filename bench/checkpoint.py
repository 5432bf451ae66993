"""Share of training time that checkpoints cost on R1 (100,000 x 20 twonorm, full trees, features_per_split 4).

Trains R1 with the default checkpoint policy of `baggr train` (runs.RunSettings) and without
checkpoints, alternately, and prints:
- the time checkpoints held up the training loop (the snapshot of the tallies; the files are
  written in a background thread), as a share of the training time;
- the wall-time difference between runs with and without checkpoints (what they really cost,
  background writing included, on this machine's cores and disk);
- one checkpoint's parts: tallies (O(rows)) and a chunk of new trees (O(new members)).
    python bench/checkpoint.py [members] [rows] [repeats]
"""
import statistics
import sys
import tempfile
import time
from pathlib import Path


from baggr.model import npzfile
from baggr.config import Config
from baggr.engine import Training
from baggr.runs import Checkpointer, RunDir, RunSettings
from util import twonorm


def one_run(X, y, config, settings, folder, background=True):
    """(wall seconds, Checkpointer or None) of one training run."""
    tr = Training(X, y, config)
    ck = None
    if settings is not None:
        ck = Checkpointer(RunDir(folder), tr, settings, {"sha256": None, "config": config.to_dict()},
                          background=background)

    def on_member(ev):
        if ck is not None and ck.due():
            ck.write()

    t0 = time.perf_counter()
    tr.run(on_member=on_member)
    if ck is not None:
        ck.wait()
    return time.perf_counter() - t0, ck, tr


def main(members: int = 120, rows: int = 100_000, repeats: int = 2) -> None:
    X, y = twonorm(rows, seed=1)
    config = Config(members=members, features_per_split=4, seed=0)
    Training(X[:2000], y[:2000], config.replace(members=2)).run()   # compile outside the measured runs
    settings = RunSettings()
    plain, with_ck, last = [], [], None
    with tempfile.TemporaryDirectory() as tmp:
        for r in range(repeats):
            plain.append(one_run(X, y, config, None, tmp)[0])
            (Path(tmp) / f"run{r}").mkdir()
            wall, ck, tr = one_run(X, y, config, settings, Path(tmp) / f"run{r}")
            with_ck.append(wall)
            last = (wall, ck, tr)
        wall, ck, tr = last
        print(f"R1: {rows} rows x 20 features, {members} members, {config.resolved_threads()} threads, "
              f"{wall / members:.3f} s per member")
        print(f"default policy: every {settings.checkpoint_members} members or {settings.checkpoint_seconds:.0f} s, "
              f"holding up training at most {100 * settings.checkpoint_budget:.0f}% of the time; "
              f"files written in a background thread")
        print(f"checkpoints per run: {ck.writes}; they held up the loop {1000 * ck.seconds:.1f} ms = "
              f"{100 * ck.seconds / wall:.2f}% of the training time; writing their files took "
              f"{ck.write_seconds:.2f} s in the background, of which {ck.write_cpu:.2f} s CPU "
              f"({100 * ck.write_cpu / (wall * config.resolved_threads()):.2f}% of the cores' time)")
        a, b = statistics.median(plain), statistics.median(with_ck)
        print(f"wall time without checkpoints {a:.2f} s, with {b:.2f} s (medians of {repeats}): "
              f"difference {100 * (b - a) / a:+.2f}%  (runs: {', '.join(f'{v:.2f}' for v in plain)} / "
              f"{', '.join(f'{v:.2f}' for v in with_ck)})")

        t0 = time.perf_counter()
        arrays, header = tr.checkpoint()
        npzfile.write_atomic(Path(tmp) / "tally-only.npz", arrays, {"next_member": header["next_member"]})
        t_tally = time.perf_counter() - t0
        k = min(settings.checkpoint_members, tr.next_member)
        t0 = time.perf_counter()
        from baggr.model.file import part_arrays
        npzfile.append(Path(tmp) / "trees.npz", part_arrays(tr.kept(0, k), 0), {}, end=0)
        t_chunk = time.perf_counter() - t0
        size = (Path(tmp) / "trees.npz").stat().st_size
        print(f"one checkpoint's tallies written in the foreground: {1000 * t_tally:.1f} ms; a part of {k} trees: "
              f"{1000 * t_chunk:.1f} ms ({size / 1e6:.1f} MB, {size / k / 1e6:.2f} MB per tree)")


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:4]))
