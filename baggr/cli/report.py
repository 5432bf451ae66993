"""The figures of a run (finished or not) for `baggr report`: text for people (report_text.py), one JSON object
for tools. Shares are fractions in the JSON and percentages in the text (baggr.units)."""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from baggr import data as _data
from baggr import units
from baggr.cli.settings_text import setting_rows, settings_json
from baggr.config import Config
from baggr.errors import ModelFileError
from baggr.runs import CHECKPOINT, MODEL, RunDir, RunDirError, read_checkpoint, status_words

EXPECTED_LEFT_OUT = math.exp(-1.0)   # share of members that leave a row out under a bootstrap draw (1 - 1/n)^n


@dataclass
class RunReport:
    """What a report shows, from model.npz or (for an unfinished run) from the latest checkpoint."""

    path: Path
    source: str                       # "model" or "checkpoint"
    oob: object                       # baggr.oob.OOB
    config: Config
    schema: object
    status: str = "model file"        # finished / stopped / running / crashed / failed / model file
    reason: str | None = None
    elapsed: float | None = None
    members_target: int | None = None
    journal_members: int | None = None
    run: dict = field(default_factory=dict)   # config.json of a run directory ({} for a bare model file)
    # While the journal is further on than the checkpoint (a running job): the journal's latest figures
    # (latest_figures), shown as the headline, and which checkpoint the rest comes from.
    latest: dict | None = None
    checkpoint: dict | None = None            # {"member": next member of the checkpoint, "t": when it was written}
    missing_target: int | None = None         # rows left out for a missing target (None: not recorded)
    threads: int | None = None                # the job's threads (from its journal)
    cluster: dict | None = None               # where its latest job grew the members (journal.cluster_of)

    @property
    def task(self) -> str:
        return self.schema.task


def load(path) -> RunReport:
    """A run directory's report figures (model.npz, or the checkpoint when it is further on), or a model file's."""
    from baggr.model.ensemble import load as load_model
    p = Path(path)
    if p.is_file():
        ens = load_model(p)
        return RunReport(p, "model", ens.oob, ens.config, ens.schema, elapsed=ens.stats.get("seconds"),
                         members_target=ens.config.members, missing_target=_count(ens.stats.get("missing_target")))
    rd = RunDir(p).require()
    run = rd.read_config()
    for _ in range(3):     # a job finishing meanwhile removes its checkpoint after writing the model: look again
        st, status = rd.state()
        ck = read_checkpoint(rd)
        ens = load_model(rd / MODEL) if (rd / MODEL).exists() else None
        if ck is not None or ens is not None:
            break
    ck_m = int(ck[0].get("next_member", 0)) if ck else None
    common = dict(status=status, reason=st.reason, members_target=st.members_target or run["config"].get("members"),
                  journal_members=st.members, run=run, threads=st.threads if isinstance(st.threads, int) else None,
                  cluster=st.cluster,
                  missing_target=_count((run.get("data") or {}).get("missing_target")))
    if ens is not None and (ck_m is None or ens.members >= ck_m):
        return RunReport(rd.path, "model", ens.oob, ens.config, ens.schema, elapsed=ens.stats.get("seconds"), **common)
    if ck is None:
        raise RunDirError(f"{rd.path} has no figures yet ({status_words(status)}; the journal shows {st.members} members and no "
                          f"checkpoint has been written): watch it with: baggr watch {rd.path}")
    header, arrays = ck
    common["checkpoint"] = {"member": ck_m, "t": _f(header.get("t"))}
    if st.members > ck_m:
        common["latest"] = latest_figures(st)
    return _from_checkpoint(rd / CHECKPOINT, header, arrays, common)


def latest_figures(st) -> dict:
    """The journal's latest member line as report figures (fractions, as in the JSON)."""
    d = {"members": st.members, "oob_error": _f(st.error), "interval": None if st.interval is None else
         [_f(v) for v in st.interval], "coverage": _f(st.coverage), "elapsed": _f(st.elapsed), "t": _f(st.last_t)}
    d.update(st.estimate_figures())
    if st.task == "regression":
        d["r2"] = _f(st.r2)
    else:
        figs = st.class_figures()
        d["class_error"] = [_f(f["error"]) for f in figs]
        d["class_interval"] = [None if f["interval"] is None else [_f(v) for v in f["interval"]] for f in figs]
        d["class_covered"] = [f["covered"] for f in figs]
        d["confusion"] = st.confusion
    return d


def _count(v) -> int | None:
    return int(v) if isinstance(v, (int, float)) and not isinstance(v, bool) and v >= 0 else None


def _from_checkpoint(path, header, arrays, common) -> RunReport:
    from baggr.model.file import _check_oob
    from baggr.oob.view import OOB
    try:
        schema = _data.Schema.from_json(header.get("schema"))
        config = Config.from_dict(header.get("config"))
    except ModelFileError:
        raise
    except Exception as e:   # a damaged header: any shape of wrong
        raise ModelFileError(f"{path}: the header is damaged ({e})") from None
    a = {k[6:]: v for k, v in arrays.items() if k.startswith("tally_")}
    a.update({k: v for k, v in arrays.items() if k == "target" or k.startswith("measure_")})
    if schema.task == "classes":
        a["class_rows"] = arrays.get("class_rows")
        if a["class_rows"] is None:
            raise ModelFileError(f"{path} lacks the class row counts")
    _check_oob(a, schema, path)
    return RunReport(Path(path).parent, "checkpoint", OOB(schema.task, schema.classes, a), config, schema,
                     elapsed=float(header.get("elapsed") or 0.0), **common)


# ---------------------------------------------------------------- figures

def settled_at(curve, lo: float, hi: float) -> int | None:
    """Smallest ensemble size from which every later point of the curve lies within [lo, hi]."""
    c = np.asarray(curve, dtype=np.float64)
    if c.shape[0] == 0 or not (math.isfinite(lo) and math.isfinite(hi)):
        return None
    outside = ~((c >= lo) & (c <= hi))     # NaN counts as outside
    bad = np.flatnonzero(outside)
    if bad.shape[0] == 0:
        return 1
    if bad[-1] == c.shape[0] - 1:
        return None
    return int(bad[-1]) + 2


def curve_sizes(m: int) -> list[int]:
    """Ensemble sizes worth a row in the curve table: 1, 5, 10, 25, 50, 100, 250, ... and m."""
    sizes, k = [], 1
    while k <= m:
        for s in (1, 2.5, 5):
            v = int(k * s)
            if v <= m and (v >= 5 or v == 1):
                sizes.append(v)
        k *= 10
    sizes = sorted(set(sizes) | {m})
    return sizes


def _f(v):
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def _pair(iv):
    return None if iv is None else [_f(iv[0]), _f(iv[1])]


def cautions(r: RunReport) -> list[str]:
    """The plain-words cautions every report carries."""
    m = r.oob.members
    judged = float(np.mean(r.oob.left_out)) if r.oob.left_out.shape[0] else 0.0
    out = [
        "The OOB estimate holds for new rows drawn the way the training rows were drawn.",
        "If one entity (a patient, a machine, a customer) gave several rows, or the data drift over time, "
        "the estimate is optimistic: rows of the same entity or period judge each other. Hold out whole "
        "entities or a later period to check.",
        "Decisions about people, money or safety need review beyond these figures.",
        f"Each row is judged only by the members that left it out: {judged:.1f} of the {m} members here, "
        "on average, so the textbook OOB error after b members is that of an ensemble of about 0.37 b "
        "members and reads high. The error, interval and curve here estimate the error of the kept "
        "ensemble itself, from each row's OOB votes extrapolated to the ensemble's size; the textbook "
        "figures are given beside them.",
    ]
    if not r.oob.corrected:
        out[-1] = (f"Each row is judged only by the members that left it out: {judged:.1f} of the {m} members "
                   "here, on average. This model file predates the estimate of the kept ensemble's error, so "
                   "its figures are the textbook OOB ones, which overstate a small ensemble's error; read the "
                   "tail of the curve, not its start.")
    if r.oob.uncovered:
        out.append(f"{r.oob.uncovered} rows were never left out; they are not counted in the error.")
    if r.latest is not None:
        out.append(f"This run is not finished: the headline and per-class figures are the journal's latest "
                   f"({r.latest['members']} members); the rest comes from the checkpoint at "
                   f"{r.checkpoint['member']} members.")
    elif r.source == "checkpoint":
        out.append("This run is not finished: the figures come from its latest checkpoint.")
    return out


def figures(r: RunReport) -> dict:
    """Everything the report shows, as one JSON-able dict."""
    oob = r.oob
    iv = oob.interval
    curve = oob.curve
    d = {"path": str(r.path), "source": r.source, "status": r.status, "reason": r.reason, "task": r.task,
         "members": oob.members, "members_target": r.members_target, "elapsed": _f(r.elapsed),
         "oob_error": _f(oob.error), "interval": None if iv is None else [_f(v) for v in iv],
         "rows": int(oob.left_out.shape[0]), "covered": oob.covered, "coverage": oob.coverage,
         "uncovered": oob.uncovered, "judged_per_row": _f(np.mean(oob.left_out)) if oob.left_out.shape[0] else None,
         "curve": [_f(v) for v in curve], "curve_interval": [[_f(a), _f(b)] for a, b in oob.curve_interval],
         "settled_at": settled_at(curve, *iv) if iv is not None else None,
         "estimate": "kept ensemble" if oob.corrected else "textbook",
         "raw_error": _f(oob.raw_error), "raw_interval": _pair(oob.raw_interval),
         "raw_curve": [_f(v) for v in oob.raw_curve],
         "raw_curve_interval": [[_f(a), _f(b)] for a, b in oob.raw_curve_interval],
         "error_limit": _f(oob.error_limit), "error_limit_interval": _pair(oob.error_limit_interval),
         "members_needed": oob.members_needed, "tolerance": _f(oob.tolerance),
         "config": settings_json(r.config, r.schema.n_features, r.task, r.threads, r.cluster),
         "missing_target": r.missing_target, "table": r.run.get("table"), "dates": r.schema.dates,
         "target": r.run.get("target") or r.schema.target,
         "data": r.run.get("data"), "version": r.run.get("version"), "created": r.run.get("created"),
         "cautions": cautions(r), "checkpoint": r.checkpoint, "latest": r.latest}
    if r.task == "classes":
        d["classes"] = list(r.schema.classes)
        d["class_rows"] = [int(v) for v in oob.class_rows]
        d["class_error"] = [_f(v) for v in oob.class_error]
        d["class_interval"] = [None if i is None else [_f(i[0]), _f(i[1])] for i in oob.class_interval]
        d["class_covered"] = [int(v) for v in oob.confusion.sum(axis=1)]
        d["confusion"] = oob.confusion.tolist()
        d["class_curve"] = [[_f(v) for v in row] for row in oob.class_curve]
        d["raw_class_error"] = [_f(v) for v in oob.raw_class_error]
        d["raw_class_curve"] = [[_f(v) for v in row] for row in oob.raw_class_curve]
    else:
        d["r2"] = _f(oob.r2)          # with the kept ensemble's estimated MSE
        d["raw_r2"] = _f(oob.raw_r2)  # the textbook one
    from baggr.cli import report_measures
    d.update(report_measures.figures(r))
    d["cautions"] += report_measures.cautions(d)
    return d


# ---------------------------------------------------------------- drawing

def _value(task, v) -> str:
    """An error as the report text writes it: a percentage of rows for classes, a figure for regression."""
    return units.value(v) if task == "regression" else units.percent(v, 2)


def _interval(task, iv) -> str:
    if iv is None or iv[0] is None:
        return "-"
    return units.value_span(iv) if task == "regression" else units.percent_span(iv, 2)


def columns_text(d: dict) -> str:
    """Which columns the run left out or kept, and its date columns, in one line ('' when none)."""
    parts = []
    table = d.get("table") or {}
    if table.get("only"):
        parts.append("only " + ", ".join(table["only"]))
    if table.get("drop"):
        parts.append("left out " + ", ".join(table["drop"]))
    for x in d.get("dates") or []:
        parts.append(f"{x['column']} as dates ({', '.join(p.replace('_', ' ') for p in x['parts'])})")
    return "; ".join(parts)


def render(r: RunReport, console, d: dict | None = None) -> None:
    """Print the report (baggr/cli/report_text.py: the look; plain text, no markup from the data)."""
    from baggr.cli.report_text import render_text
    rows = setting_rows(r.config, r.schema.n_features, r.task, r.threads, r.cluster)
    render_text(r, d or figures(r), console, settings=rows)
