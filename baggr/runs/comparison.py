"""A comparison directory: several candidates (settings of one learner) trained on the same data with
the same seed, one ordinary run directory each, so watch, report, predict and resume work on every
candidate alone.

    runs/<data>-compare-<date>-<time>/
        comparison.json    the candidates, their varied settings, the data, the block of members
        journal.jsonl      the comparison job's start, round and end lines
        lock, job.log, stop
        targets.npz        the training rows' targets, written once (the paired figures need them)
        c1-fps2/ ...       one run directory per candidate
"""
from __future__ import annotations

import itertools
import json
import time
from dataclasses import dataclass, field
from pathlib import Path

from baggr.version import __version__
from baggr.config import Config
from baggr.errors import ConfigError, RunDirError
from baggr.runs.files import CONFIG, JOURNAL, write_error, write_json_atomic
from baggr.runs.rundir import RunDir, RunSettings, create, default_run_dir, init_config, table_options

COMPARISON = "comparison.json"
TARGETS = "targets.npz"
FORMAT = "baggr-comparison"
FORMAT_VERSION = 1
MAX_CANDIDATES = 100
DEFAULT_BLOCK = 25

# the ensemble settings a comparison may vary, in the order candidates are made and named
VARIED = ("members", "features_per_split", "min_leaf", "depth_limit", "draw", "draw_fraction", "bins", "vote",
          "criterion")
SHARED = ("seed", "threads", "task", "keep_members")     # one value for all candidates
TERSE = {"members": "members", "features_per_split": "fps", "min_leaf": "leaf", "depth_limit": "depth",
         "draw": "draw", "draw_fraction": "frac", "bins": "bins", "vote": "vote", "criterion": "crit"}
SHORT = {"members": "m", "features_per_split": "fps", "min_leaf": "leaf", "depth_limit": "depth", "draw": "",
         "draw_fraction": "frac", "bins": "bins", "vote": "vote", "criterion": ""}


@dataclass
class Candidate:
    """One candidate: its number (1-based), the settings it varies and its run directory's name."""

    number: int
    settings: dict
    run_dir: str

    def label(self) -> str:
        return " ".join(f"{k}={_text(v)}" for k, v in self.settings.items()) or "(the base settings)"

    def terse(self) -> str:
        """The label in a table's few characters: fps=2 leaf=5."""
        return " ".join(f"{TERSE.get(k, k)}={_text(v)}" for k, v in self.settings.items()) or "base"


@dataclass
class Comparison:
    """A comparison directory's comparison.json."""

    path: Path
    data: dict
    target: str
    candidates: list[Candidate]
    block: int = DEFAULT_BLOCK
    measure: str | None = None
    base: dict = field(default_factory=dict)
    created: str = ""
    table: dict = field(default_factory=dict)      # how the data file is read (rundir.TABLE_OPTIONS)

    def __truediv__(self, name) -> Path:
        return self.path / name

    def run_dirs(self) -> list[RunDir]:
        return [RunDir(self.path / c.run_dir) for c in self.candidates]

    def rundir(self) -> RunDir:
        """The comparison directory as a RunDir: its own lock, journal, stop file and job.log."""
        return RunDir(self.path)

    def to_json(self) -> dict:
        return {"format": FORMAT, "format_version": FORMAT_VERSION, "version": __version__, "created": self.created,
                "data": self.data, "target": self.target, "block": self.block, "measure": self.measure,
                "base": self.base, "table": self.table,
                "candidates": [{"number": c.number, "settings": c.settings, "run_dir": c.run_dir}
                               for c in self.candidates]}

    def write(self) -> None:
        try:
            write_json_atomic(self.path / COMPARISON, self.to_json())
        except OSError as e:
            raise write_error("the comparison file", self.path / COMPARISON, e) from None


def is_comparison(path) -> bool:
    return (Path(path) / COMPARISON).is_file()


def read(path) -> Comparison:
    """The comparison of a comparison directory; RunDirError when it is not one or is damaged."""
    p = Path(path)
    f = p / COMPARISON
    try:
        d = json.loads(f.read_text())
    except FileNotFoundError:
        raise RunDirError(f"{p} is not a comparison directory (no {COMPARISON})") from None
    except (OSError, ValueError) as e:
        raise RunDirError(f"{f} is damaged ({e})") from None
    if not isinstance(d, dict) or d.get("format") != FORMAT:
        raise RunDirError(f"{f} is not a baggr comparison file")
    v = d.get("format_version")
    if not isinstance(v, int) or v > FORMAT_VERSION:
        raise RunDirError(f"{f} was written by a newer baggr (comparison format {v!r}): upgrade baggr to read it")
    try:
        cands = [Candidate(int(c["number"]), dict(c["settings"]), str(c["run_dir"])) for c in d["candidates"]]
        cmp = Comparison(p, dict(d["data"]), str(d["target"]), cands, int(d.get("block") or DEFAULT_BLOCK),
                         d.get("measure"), dict(d.get("base") or {}), str(d.get("created") or ""),
                         table_options(d))
    except (KeyError, TypeError, ValueError) as e:
        raise RunDirError(f"{f} is damaged ({type(e).__name__}: {e})") from None
    for c in cands:
        if "/" in c.run_dir or c.run_dir in ("", ".", ".."):
            raise RunDirError(f"{f} is damaged (candidate folder {c.run_dir!r})")
    return cmp


def default_dir(data_path, root="runs") -> Path:
    """runs/<data-name>-compare-<YYYYmmdd-HHMMSS> (with -2, -3, ... if taken)."""
    return default_run_dir(data_path, root, kind="compare")


# ---------------------------------------------------------------- the candidates

def grid(values: dict) -> list[dict]:
    """One candidate per combination of the listed values (setting -> list of values), in VARIED order;
    only the settings with more than one value are the candidates' own."""
    for k in values:
        if k not in VARIED:
            raise ConfigError(f"{k} cannot take several values in a comparison")
    keys = [k for k in VARIED if k in values and len(values[k]) > 1]
    for k in keys:
        seen = set()
        for v in values[k]:
            if _key(v) in seen:
                raise ConfigError(f"{k.replace('_', '-')} lists {_text(v)} twice")
            seen.add(_key(v))
    combos = list(itertools.product(*[values[k] for k in keys]))
    if len(combos) > MAX_CANDIDATES:
        raise ConfigError(f"{len(combos)} candidates is more than {MAX_CANDIDATES}; list fewer values")
    return [dict(zip(keys, c)) for c in combos]


def check_candidates(base: Config, cands: list[dict]) -> list[Config]:
    """Each candidate's Config (base with its settings); ConfigError for a bad or repeated one."""
    if not cands:
        raise ConfigError("no candidates to compare")
    if len(cands) > MAX_CANDIDATES:
        raise ConfigError(f"{len(cands)} candidates is more than {MAX_CANDIDATES}")
    configs, seen = [], {}
    for i, s in enumerate(cands, 1):
        for k in s:
            if k in SHARED:
                raise ConfigError(f"candidate {i}: {k} is shared by all candidates (common random numbers); "
                                  f"set it once for the comparison")
            if k not in VARIED:
                raise ConfigError(f"candidate {i}: unknown setting {k!r} (one of {', '.join(VARIED)})")
        try:
            cfg = base.replace(**s)
        except ConfigError as e:
            raise ConfigError(f"candidate {i}: {e}") from None
        key = json.dumps(cfg.to_dict(), sort_keys=True)
        if key in seen:
            raise ConfigError(f"candidates {seen[key]} and {i} have the same settings")
        seen[key] = i
        configs.append(cfg)
    return configs


def names(cands: list[dict]) -> list[str]:
    """Folder names c1-fps2-leaf5, ... (the number keeps them apart and in order)."""
    width = len(str(len(cands)))
    out = []
    for i, s in enumerate(cands, 1):
        parts = [f"{SHORT.get(k, k)}{_slug(v)}" for k, v in s.items()]
        out.append("-".join([f"c{i:0{width}d}", *parts])[:80])
    return out


def create_comparison(path, *, data: dict, target: str, base: Config, candidates: list[dict],
                      settings: RunSettings, block: int = DEFAULT_BLOCK, measure: str | None = None,
                      table: dict | None = None, force: bool = False) -> Comparison:
    """Make the comparison directory and one run directory per candidate (all settings checked first)."""
    configs = check_candidates(base, candidates)
    if not isinstance(block, int) or block < 1:
        raise ConfigError(f"--block must be a whole number >= 1, got {block!r}")
    rd = create(path, force=force)
    folders = names(candidates)
    try:
        for folder, cfg in zip(folders, configs):
            sub = create(rd.path / folder)
            init_config(sub, data=data, target=target, config=cfg, settings=settings, table=table)
        base_d = {k: v for k, v in base.to_dict().items() if not any(k in c for c in candidates)}
        cmp = Comparison(rd.path, dict(data), target,
                         [Candidate(i, dict(s), f) for i, (s, f) in enumerate(zip(candidates, folders), 1)],
                         block, measure, base_d, time.strftime("%Y-%m-%dT%H:%M:%S%z"),
                         table_options({"table": table or {}}))
        cmp.write()
    except BaseException:
        import shutil
        shutil.rmtree(rd.path, ignore_errors=True)
        raise
    return cmp


def candidate_configs(cmp: Comparison) -> list[Config]:
    """The Config of every candidate, read from its run directory."""
    return [Config.from_dict(rd.read_config()["config"]) for rd in cmp.run_dirs()]


def draws_differ(configs: list[Config]) -> list[int]:
    """1-based numbers of the candidates whose rows are drawn otherwise than candidate 1's (another
    draw scheme or fraction): for them member m does not draw the same rows."""
    first = configs[0]
    return [i for i, c in enumerate(configs, 1)
            if (c.draw, c.draw_fraction if c.draw == "subsample" else None)
            != (first.draw, first.draw_fraction if first.draw == "subsample" else None)]


def _text(v) -> str:
    return "none" if v is None else str(v)


def _slug(v) -> str:
    t = _text(v)
    return "".join(ch if ch.isalnum() or ch in "._" else "_" for ch in t)


def _key(v):
    return (type(v).__name__, v)


__all__ = ["COMPARISON", "CONFIG", "JOURNAL", "TARGETS", "Candidate", "Comparison", "candidate_configs",
           "check_candidates", "create_comparison", "default_dir", "draws_differ", "grid", "is_comparison",
           "names", "read"]
