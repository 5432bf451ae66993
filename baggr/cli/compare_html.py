"""`baggr report COMPARISON_DIR --html FILE` (and `--figures DIR`): a comparison as one self-contained
HTML page, in the run report's look (cli/html.py): the ranked table with the paired differences, every
candidate's curves overlaid, the shared-draws statement, the data's fingerprint and the cautions.
"""
from __future__ import annotations

import math

from baggr import units
from baggr.cli import compare_figures as CF
from baggr.cli import compare_report as CR
from baggr.cli import figures as F
from baggr.cli import html as H
from baggr.runs.comparison import TERSE, VARIED

CAPTIONS = {
    "differences": "Each candidate's figure minus the best's on the rows both judged (a paired difference: "
                   "the same rows, and with a shared seed the same draws), with its 95% interval. A hollow "
                   "point: the OOB rows do not tell it from the best (Holm-adjusted p >= 0.05).",
    "curves": "The estimated OOB figure of each candidate's kept ensemble after each number of members, with "
              "its 95% band. The vertical scale fits the curves from a tenth of the ensemble on; a small "
              "ensemble's figure lies above it.",
    "measures": "The measure the candidates are ranked on, at the log-spaced ensemble sizes where each run "
                "computed it, with its 95% band.",
}


def runs_figures(r) -> list:
    """Each ranked candidate's run report figures (cli.report.figures), None while it has none."""
    from baggr.cli import report
    from baggr.runs import RunDirError
    out = []
    for c in r.candidates:
        try:
            out.append(report.figures(report.load(c["run_dir"])))
        except RunDirError:
            out.append(None)
    return out


def _label(r) -> str:
    from baggr.runs.measure_points import LABELS
    return LABELS.get(r.measure, r.measure)


def _oob(label: str) -> str:
    """'OOB log loss', 'OOB MSE' (the label of the error and MSE says OOB already)."""
    return label if label.startswith("OOB") else f"OOB {label}"


def figures(r, runs: list) -> dict:
    return CF.all_figures(r.candidates, runs, r.measure, r.task, _label(r))


def render(r) -> str:
    """The HTML text of a comparison report (cli.compare_report.load)."""
    runs = runs_figures(r)
    figs = figures(r, runs)
    try:
        return _page(r, runs, figs)
    finally:
        F.close(figs.values())


def write_figures(r, folder) -> list:
    """Write every figure of the comparison as PNG and SVG into folder; returns the paths written."""
    return H.save_figures(figures(r, runs_figures(r)), folder)


def shared_draws(r) -> str:
    """What the candidates share: the seed and, where the draw scheme is one, every member's rows."""
    from baggr.runs import comparison
    cmp = comparison.read(r.path)
    configs = comparison.candidate_configs(cmp)
    differ = comparison.draws_differ(configs)
    seed, draw = configs[0].seed, configs[0].draw
    n = len(configs)
    if not differ:
        return (f"All {n} candidates share the seed {seed} and the draw scheme ({draw}): member m of every "
                f"candidate draws the same rows (common random numbers), so each row is left out by the same "
                f"members everywhere and the paired differences compare the candidates on the same draws, with "
                f"less noise than runs with independent seeds.")
    names = ", ".join(f"c{i}" for i in differ)
    return (f"All {n} candidates share the seed {seed}, but {names} draw{'s' if len(differ) == 1 else ''} rows by "
            f"another scheme than c1 ({draw}): there member m does not draw the same rows, so those pairs do not "
            f"share their draws; the paired tests still pair the rows, with more noise. The others share every "
            f"member's rows (common random numbers).")


class Fmt:
    """A measure's figures in one style down a table: percentages for error-type measures, else a
    fixed number of decimals that shows the values' first four significant digits."""

    def __init__(self, measure: str, values):
        self.share = measure in CF.SHARES
        big = max((abs(v) for v in values if v is not None and math.isfinite(v)), default=1.0)
        self.decimals = max(1, min(6, 3 - math.floor(math.log10(big)))) if big > 0 else 4

    def __call__(self, v, signed: bool = False) -> str:
        if v is None or not math.isfinite(v):
            return "-"
        sign = "+" if signed else ""
        if self.share:
            return f"{100 * v:{sign}.2f}%"
        return f"{v:{sign},.{self.decimals}f}"

    def span(self, iv, signed: bool = False) -> str:
        if not iv or iv[0] is None or iv[1] is None:
            return "-"
        return f"{self(iv[0], signed)} – {self(iv[1], signed)}"


def _setting(settings: dict, k: str) -> str:
    """A candidate's value of a varied setting; '-' where it keeps the comparison's base value."""
    if k not in settings:
        return "-"
    return H.setting_text(settings[k])


def _ranked_table(r) -> str:
    keys = sorted({k for c in r.candidates for k in c["settings"]},
                  key=lambda k: VARIED.index(k) if k in VARIED else 99)
    head = ["#", "candidate", *(TERSE.get(k, k) for k in keys), "members", _label(r), "95% interval",
            "members needed", "time per member", "difference to best", "95% interval", "p (Holm)", ""]
    f = Fmt(r.measure, [c["value"] for c in r.candidates])
    rows, marks = [], []
    for rank, c in enumerate(r.candidates):
        spm = c["seconds_per_member"]
        best = rank == 0 and c["value"] is not None
        rows.append([str(rank + 1), f"c{c['number']}", *(_setting(c["settings"], k) for k in keys),
                     units.count(c["members"]), f(c["value"]), f.span(c["interval"]),
                     units.count(c["members_needed"]) if c["members_needed"] else "-",
                     units.short_time(spm),
                     "-" if best else f(c["difference"], True),
                     "-" if best else f.span(c["difference_interval"], True),
                     "-" if best else CR._p(c["p_value"]),
                     "best" if best else ("close" if c["close"] else "")])
        marks.append("chosen" if best else "")
    n = len(head)
    return H._table(head, rows, marks, text_cols=(1, n - 1), nowrap=range(n), css="ranked")


def _page(r, runs: list, figs: dict) -> str:
    from baggr.runs import comparison
    cmp = comparison.read(r.path)
    label = _label(r)
    parts = [f"<header><h1><span class=\"mark\">baggr</span> comparison</h1>"
             f"<p class=\"sub\">{H._e(r.path)} &middot; {H._e(r.status)}"
             f"{(' (' + H._e(r.reason) + ')') if r.reason else ''}</p></header>"]
    best = r.candidates[0] if r.candidates and r.candidates[0]["value"] is not None else None
    rows_n = next((d["rows"] for d in runs if d), None)
    tiles = []
    if best is not None:
        f = Fmt(r.measure, [c["value"] for c in r.candidates])
        tiles.append((f"best on {label}", f"c{best['number']} {best['terse']}",
                      f"{f(best['value'])}, 95% interval {f.span(best['interval'])}"))
    tiles.append(("candidates", f"{len(r.candidates):,}", f"ranked on {_oob(label)}"))
    if rows_n is not None:
        tiles.append(("rows", f"{rows_n:,}", f"target {cmp.target}"))
    parts.append('<div class="headline">' + "".join(
        f'<div class="tile"><div class="k">{H._e(k)}</div><div class="v">{H._e(v)}</div>'
        f'<div class="iv">{H._e(s)}</div></div>' for k, v, s in tiles) + "</div>")
    parts.append(f'<p class="verdict">{H._e(r.verdict)}</p>')

    parts.append(f"<h2>Ranked on {H._e(_oob(label))}, best first</h2>")
    parts.append(_ranked_table(r))
    methods = sorted({c["method"] for c in r.candidates if c.get("method")})
    legend = "; ".join(f"{TERSE.get(k, k)} = {k.replace('_', ' ')}" for k in sorted({k for c in r.candidates
                                                                               for k in c["settings"]}))
    parts.append('<p class="sub">' + H._e(
        (f"Settings: {legend}. " if legend else "") +
        f"The {label} and its interval are each candidate's own figure for its kept ensemble; "
        f"members needed: the fewest members whose figure comes within tolerance of an unlimited ensemble's; "
        f"difference: candidate minus best on the rows both judged, from their textbook per-row OOB outcomes "
        f"(so a candidate close to the best can show one below zero)"
        + (f" ({'; '.join(methods)})" if methods else "") +
        "; p-values adjusted across the comparisons with the best by Holm's method (Holm 1979).") + "</p>")
    if "differences" in figs:
        parts.append(H._figure(figs["differences"], "differences", CAPTIONS["differences"]))

    parts.append("<h2>By ensemble size</h2>")
    for name in ("curves", "measures"):
        if name in figs:
            parts.append(H._figure(figs[name], name, CAPTIONS[name]))

    parts.append("<h2>Fair by construction</h2>")
    parts.append(f"<p>{H._e(shared_draws(r))}</p>")
    if r.notes:
        parts.append('<ul class="notes">' + "".join(f"<li>{H._e(n)}</li>" for n in r.notes) + "</ul>")

    first = next((d for d in runs if d), None)
    if first is not None:
        varied = {k for c in r.candidates for k in c["settings"]}
        shared = [[k.replace("_", " "), r.measure if k == "measure" else H.setting_text(v)]
                  for k, v in first["config"].items() if not any(k.startswith(x) for x in varied)]
        parts.append("<h2>Settings shared by all candidates</h2>")
        parts.append(H._table(["setting", "value"], shared, text_cols=(1,)))

    parts.append("<h2>Data</h2>")
    data = cmp.data or {}
    rows = [["file", data.get("path") or "-"], ["bytes", f"{data['bytes']:,}" if data.get("bytes") else "-"],
            ["SHA-256", data.get("sha256") or "-"], ["target", cmp.target],
            ["rows", f"{rows_n:,}" if rows_n is not None else "-"]]
    if first is not None and first.get("version"):
        rows.append(["made by", f"baggr {first['version']}, {cmp.created or first.get('created')}"])
    parts.append(H._table(None, rows, text_cols=(1,)))

    parts.append('<h2>Read with care</h2><ul class="cautions">' +
                 "".join(f"<li>{H._e(c)}</li>" for c in r.cautions) + "</ul>")
    parts.append("<footer>Made by baggr from the comparison's own files; each candidate is an ordinary run "
                 "(baggr report, predict, watch on its folder); this page loads nothing from anywhere.</footer>")
    return H.page(f"baggr comparison: {cmp.target}", "\n".join(parts), broad=True)

