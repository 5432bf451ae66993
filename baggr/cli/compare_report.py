"""`baggr report COMPARISON_DIR`: the candidates ranked on one measure, each paired with the best on
the OOB rows both judged (Holm-adjusted p-values), with the cautions that choosing on OOB rows needs."""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

from baggr.errors import ConfigError, ModelFileError
from baggr.runs import RunDirError

MANY = 5      # from this many candidates on, the winner's curse deserves a hold-out check


@dataclass
class ComparisonReport:
    path: Path
    measure: str
    task: str
    status: str
    reason: str | None
    candidates: list          # ranked best first: dicts (see to_json)
    verdict: str
    notes: list = field(default_factory=list)
    cautions: list = field(default_factory=list)


def members_needed(r, measure: str) -> int | None:
    """The fewest members within tolerance of the measure's limit (baggr.oob.measure_fit; the error's
    where the measure has no estimate, the AUC of three or more classes); None: not estimated."""
    est = r.oob.measure_estimate(measure)
    if est is None:
        return r.oob.members_needed
    return est["members_needed"]


def _targets(path: Path):
    from baggr.model import npzfile
    from baggr.runs.comparison import TARGETS
    f = path / TARGETS
    if not f.exists():
        return None, None
    header, arrays = npzfile.read(f, "targets file")
    y = arrays.get("y")
    if y is None or y.ndim != 1 or header.get("task") not in ("classes", "regression"):
        raise ModelFileError(f"{f} is damaged")
    return y, header["task"]


def load(path, measure: str | None = None) -> ComparisonReport:
    from baggr.cli import report
    from baggr.oob import ranking
    from baggr.runs import comparison
    cmp = comparison.read(path)
    rd = cmp.rundir()
    st, status = rd.state()
    y, task = _targets(cmp.path)
    if y is None:
        raise RunDirError(f"{cmp.path} has no figures yet ({status}): the comparison has not read its data; "
                          f"follow it with: baggr watch {cmp.path}")
    runs, missing = [], []
    for c in cmp.candidates:
        try:
            r = report.load(cmp.path / c.run_dir)
        except RunDirError:
            r = None
            missing.append(c.number)
        if r is not None and r.oob.left_out.shape[0] != y.shape[0]:
            raise ModelFileError(f"{cmp.path / c.run_dir} holds {r.oob.left_out.shape[0]} rows, the comparison "
                                 f"{y.shape[0]}")
        runs.append(r)
    measure = measure or cmp.measure or ranking.default_measure(task)
    try:
        ranking.check_measure(measure, task)
    except ValueError as e:
        raise ConfigError(str(e)) from None
    ranked = ranking.rank([r.oob if r is not None else None for r in runs], y, measure)
    out = []
    for f in ranked:
        c, r = cmp.candidates[f["index"]], runs[f["index"]]
        needed = members_needed(r, measure) if r is not None else None
        members = r.oob.members if r is not None else 0
        spm = r.elapsed / members if r is not None and r.elapsed and members else None
        out.append({"number": c.number, "label": c.label(), "terse": c.terse(), "settings": c.settings,
                    "run_dir": str(cmp.path / c.run_dir), "measure": measure, "value": _f(f["value"]),
                    "interval": _pair(f["interval"]), "difference": _f(f["difference"]),
                    "difference_interval": _pair(f["difference_interval"]), "p_value": _f(f["p_value"]),
                    "p_unadjusted": _f(f["p_raw"]), "paired_rows": f["rows"], "method": f["method"],
                    "close": bool(f["close"]), "members": members,
                    "members_target": r.members_target if r is not None else None,
                    "status": r.status if r is not None else "no figures yet",
                    "members_needed": needed, "seconds_per_member": _f(spm)})
    from baggr.runs.comparison import candidate_configs, draws_differ
    configs = candidate_configs(cmp)
    notes = _notes(cmp, out, configs, missing, draws_differ(configs))
    return ComparisonReport(cmp.path, measure, task, status, st.reason, out, _verdict(out, measure), notes,
                            _cautions(len(cmp.candidates), out))


def _verdict(cands: list, measure: str) -> str:
    have = [c for c in cands if c["value"] is not None]
    if not have:
        return "No candidate has figures yet."
    best = have[0]
    if len(have) == 1:
        return f"Only c{best['number']} ({best['label']}) has figures so far."
    close = [c for c in have[1:] if c["close"]]
    if close:
        names = ", ".join(f"c{c['number']}" for c in close)
        return (f"No clear winner: c{best['number']} ({best['label']}) has the best {measure}, but {names} "
                f"{'is' if len(close) == 1 else 'are'} close to it (Holm-adjusted p >= 0.05): the OOB rows do not "
                f"tell them apart. Choose among them on other grounds (time per member, size), or grow more "
                f"members or rows.")
    return (f"c{best['number']} ({best['label']}) is best on {measure}: every other candidate is worse with a "
            f"Holm-adjusted p-value below 0.05.")


def _notes(cmp, cands, configs, missing, other_draws) -> list:
    notes = []
    if other_draws:
        names = ", ".join(f"c{i}" for i in other_draws)
        notes.append(f"{names} draw{'s' if len(other_draws) == 1 else ''} rows by another scheme than c1: member m "
                     f"does not draw the same rows there, so those pairs do not share their draws (common random "
                     f"numbers); the paired tests still pair the rows, but with more noise.")
    sizes = {c["members"] for c in cands if c["value"] is not None}
    if len(sizes) > 1:
        notes.append(f"The candidates hold {min(sizes)} to {max(sizes)} members: a smaller ensemble's OOB figure "
                     f"reads worse (each row is judged by fewer members), so compare at equal sizes where you can.")
    if missing:
        notes.append("No figures yet for " + ", ".join(f"c{i}" for i in missing) + ".")
    unfinished = [c for c in cands if c["value"] is not None and c["status"] not in ("finished", "model file")]
    if unfinished:
        notes.append("Not finished: " + ", ".join(f"c{c['number']} ({c['status']}, {c['members']} members)"
                                                     for c in unfinished) + ".")
    notes.append("Each value and interval is the candidate's estimate for its kept ensemble (as baggr report "
                 "gives it), members_needed that of the measure; the paired tests compare the candidates' "
                 "textbook per-row OOB outcomes on the rows both judged, so a candidate close to the best "
                 "can show a difference below zero.")
    return notes


def _cautions(n: int, cands: list) -> list:
    out = ["Choosing the best of several candidates on the same OOB rows is optimistic: its figure is the "
           "maximum of noisy estimates (the winner's curse). Read the differences and their p-values, not the "
           "best figure alone."]
    if n >= MANY:
        out.append(f"With {n} candidates, confirm the choice on rows held apart from this comparison "
                   f"(a later period or other entities) before relying on its figure.")
    out.append("The p-values are adjusted across the comparisons with the best by Holm's method (Holm 1979).")
    return out


def _f(v):
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def _pair(iv):
    return None if iv is None else [_f(iv[0]), _f(iv[1])]


def to_json(r: ComparisonReport) -> dict:
    keys = ("settings", "run_dir", "measure", "value", "interval", "difference", "difference_interval",
            "p_value", "members_needed", "seconds_per_member", "number", "label", "members", "members_target",
            "status", "close", "p_unadjusted", "paired_rows", "method")
    cands = [{k: c[k] for k in keys} for c in r.candidates]
    best = 0 if cands and cands[0]["value"] is not None else None
    return {"path": str(r.path), "status": r.status, "reason": r.reason, "task": r.task, "measure": r.measure,
            "best": best, "candidates": cands, "verdict": r.verdict, "notes": r.notes, "cautions": r.cautions}


# ---------------------------------------------------------------- drawing

SHARES = ("error", "balanced-error")      # read as percentages (baggr.units); JSON keeps fractions


def _num(v, measure: str) -> str:
    from baggr import units
    return units.percent(v) if measure in SHARES else units.value(v)


def _iv(iv, measure: str) -> str:
    from baggr import units
    if iv is None or iv[0] is None:
        return "-"
    return units.percent_span(iv, 2) if measure in SHARES else units.value_span(iv)


def _signed(v, measure: str) -> str:
    if v is None:
        return "-"
    return ("+" if v > 0 else "") + _num(v, measure)


def _diff_iv(iv, measure: str) -> str:
    """A difference's interval, signs shown: [-1.85%, +2.52%]."""
    if iv is None or iv[0] is None:
        return "-"
    return f"[{_signed(iv[0], measure)}, {_signed(iv[1], measure)}]"


def _p(p) -> str:
    if p is None:
        return "-"
    return "<0.0001" if p < 1e-4 else f"{p:.4f}"


def render(r: ComparisonReport, console) -> None:
    import textwrap

    from rich import box
    from rich.table import Table
    from rich.text import Text

    from baggr import units

    console.print(Text(f"Comparison {r.path}   {r.status}" + (f" ({r.reason})" if r.reason else ""), style="bold"))
    used = sorted({k for c in r.candidates for k in c["settings"]})
    from baggr.runs.comparison import TERSE
    legend = ", ".join(f"{TERSE.get(k, k)} = {k}" for k in used if TERSE.get(k, k) != k)
    console.print(Text(f"{len(r.candidates)} candidates ranked on OOB {r.measure}, best first"
                       + (f" ({legend})" if legend else "")))
    t = Table(box=box.SIMPLE_HEAD, padding=(0, 1), title="Ranked", title_justify="left", title_style="bold")
    for col, just in (("#", "right"), ("candidate", "left"), ("size", "right"), (r.measure, "right"),
                      ("95% interval", "right"), ("needed", "right"), ("per member", "right")):
        t.add_column(col, justify=just, no_wrap=col != "candidate")
    for k, c in enumerate(r.candidates, 1):
        spm = c["seconds_per_member"]
        t.add_row(str(k), Text(f"c{c['number']} {c['terse']}"), str(c["members"]), _num(c["value"], r.measure),
                  _iv(c["interval"], r.measure), str(c["members_needed"] or "-"),
                  units.short_time(spm))
    console.print(t)
    d = Table(box=box.SIMPLE_HEAD, padding=(0, 1), title="Paired with the best (candidate minus best, same rows)",
              title_justify="left", title_style="bold")
    for col, just in (("#", "right"), ("candidate", "left"), ("difference", "right"), ("95% interval", "right"),
                      ("p (Holm)", "right"), ("p", "right"), ("", "left")):
        d.add_column(col, justify=just, no_wrap=True)
    for k, c in enumerate(r.candidates, 1):
        if k == 1 and c["value"] is not None:
            d.add_row(str(k), f"c{c['number']}", "-", "-", "-", "-", "best")
            continue
        d.add_row(str(k), f"c{c['number']}", _signed(c["difference"], r.measure),
                  _diff_iv(c["difference_interval"], r.measure),
                  _p(c["p_value"]), _p(c["p_unadjusted"]), "close" if c["close"] else "")
    console.print(d)
    width = max(40, min(console.width, 100) - 4)
    console.print(Text(textwrap.fill(r.verdict, width + 4), style="bold"))
    for head, lines in (("Notes", r.notes), ("Read with care", r.cautions)):
        if lines:
            console.print()
            console.print(Text(head, style="bold"))
            for line in lines:
                console.print(Text(textwrap.fill(line, width, initial_indent="  - ", subsequent_indent="    ")))
    console.print()
    console.print(Text("Each candidate is an ordinary run: baggr report / predict / watch "
                       f"{r.candidates[0]['run_dir'] if r.candidates else r.path}"))
