"""`baggr report DIR --html FILE`: the report as one self-contained HTML file.

Everything is inside the file: the style sheet, and the figures as data: URIs (SVG; PNG for
scatter plots of many points). It loads nothing from anywhere, runs no script, and opens
offline in any browser; it prints on paper as it shows on screen.
"""
from __future__ import annotations

import base64
import html
import math

from baggr import units
from baggr.cli import figures as F

STYLE = """
:root { --ink: #2b3038; --slate: #76808c; --paper: #fbfaf7; --rule: #e6e2d8; --teal: #3f9c8f; --ochre: #c98f3c; }
* { box-sizing: border-box; }
body { margin: 0; background: var(--paper); color: var(--ink);
       font: 15px/1.5 "DejaVu Sans", "Segoe UI", Helvetica, Arial, sans-serif; }
main { max-width: 60rem; margin: 0 auto; padding: 2rem 1.5rem 4rem; }
main.broad { max-width: 70rem; }
header { border-bottom: 3px solid var(--teal); padding-bottom: 0.8rem; margin-bottom: 1.2rem; }
h1 { font-size: 1.55rem; margin: 0 0 0.2rem; letter-spacing: 0.01em; }
h1 .mark { color: var(--teal); }
h2 { font-size: 1.15rem; margin: 2.2rem 0 0.6rem; padding-bottom: 0.2rem; border-bottom: 1px solid var(--rule); }
h3 { font-size: 1rem; margin: 1.4rem 0 0.4rem; }
.sub { color: var(--slate); margin: 0; }
.headline { display: flex; flex-wrap: wrap; gap: 0.8rem; margin: 1rem 0; }
.tile { border: 1px solid var(--rule); border-left: 4px solid var(--teal); background: #fff; padding: 0.6rem 0.9rem;
        min-width: 11rem; }
.tile .k { color: var(--slate); font-size: 0.8rem; text-transform: uppercase; letter-spacing: 0.06em; }
.tile .v { font-size: 1.35rem; font-weight: bold; }
.tile .iv { color: var(--slate); font-size: 0.85rem; }
table { border-collapse: collapse; margin: 0.4rem 0 1rem; font-size: 0.9rem; }
th, td { padding: 0.28rem 0.7rem; border-bottom: 1px solid var(--rule); text-align: right; vertical-align: top; }
th { color: var(--slate); font-weight: normal; border-bottom: 1px solid var(--slate); }
td:first-child, th:first-child { text-align: left; }
td.text, th.text { text-align: left; }
.wide { overflow-x: auto; }
td.iv { white-space: nowrap; }
table.stacked td { line-height: 1.25; padding-top: 0.35rem; padding-bottom: 0.35rem; }
td .ivl { color: var(--slate); font-size: 0.82em; }
tr.chosen td { font-weight: bold; }
figure { margin: 0.8rem 0 1.4rem; }
figure img { max-width: 100%; height: auto; display: block; border: 1px solid var(--rule); }
figcaption { color: var(--slate); font-size: 0.85rem; margin-top: 0.3rem; }
.cautions { border-left: 4px solid var(--ochre); background: #fff; padding: 0.6rem 1rem 0.6rem 1.6rem; }
.cautions li, .notes li { margin: 0.3rem 0; }
.verdict { border-left: 4px solid var(--teal); background: #fff; padding: 0.6rem 1rem; font-weight: bold; }
table.ranked { font-size: 0.84rem; }
table.ranked th, table.ranked td { padding: 0.28rem 0.45rem; }
table.compact th, table.compact td { padding: 0.28rem 0.4rem; }
code, .mono { font-family: "DejaVu Sans Mono", Menlo, Consolas, monospace; font-size: 0.85em; word-break: break-all; }
footer { margin-top: 3rem; color: var(--slate); font-size: 0.8rem; }
@media print { main { max-width: none; padding: 0; } figure, table { break-inside: avoid; } }
"""

CAPTIONS = {
    "curve": "The estimated error of an ensemble of each size, all rows (dark) and each class, with the 95% "
             "interval of all rows shaded; the dashed line is the textbook OOB figure, which reads high for small "
             "sizes because each row is judged by only about 0.37 of the members. The dotted line is the "
             "estimated limit of an unlimited ensemble; the vertical one marks the members needed to come "
             "within the tolerance of it.",
    "measure": "The measure this run is judged by, computed while the run went at log-spaced ensemble sizes, "
               "with its 95% interval; the diamond is the final figure.",
    "importance": "Left: the rise in a member's OOB error when one feature's values are shuffled among the "
                  "rows it left out (Breiman 2001), mean over members with 95% error bars. Right: the impurity "
                  "decrease of the feature's splits, which favours features with many distinct values.",
    "confusion": "Rows: the true class; columns: the OOB prediction. Numbers are rows; the shade is the share "
                 "of the true class's rows.",
    "reliability": "Rows grouped by their OOB share of a class (ten bins; larger points hold more rows) against "
                   "how often those rows were of that class. Points on the dashed line: the shares can be read "
                   "as probabilities.",
    "reliability-regression": "Each row's OOB prediction against its target; on the dashed line they agree.",
}


def _e(v) -> str:
    return html.escape(str(v), quote=True)


def setting_text(v) -> str:
    """A setting's value in the command's words: none, yes/no, else as written."""
    if v is None:
        return "none"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, dict) and "address" in v:     # where the members grew (settings_json's "cluster")
        from baggr.runs.journal import grown_on
        return grown_on(v)
    return str(v)


def _fmt(v, task="classes", digits=4) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "-"
    if isinstance(v, int):
        return f"{v:,}"
    return f"{v:.4g}" if task == "regression" else f"{v:.{digits}f}"


def _iv(iv, task="classes", digits=4) -> str:
    if not iv or iv[0] is None:
        return "-"
    return f"{_fmt(iv[0], task, digits)} – {_fmt(iv[1], task, digits)}"


SHARES = ("error", "balanced-error")      # error-type measures: percentages, as on the screens (baggr.units)


class Raw(str):
    """A table cell already written as HTML (escaped where it holds data)."""


def _err(v, task) -> str:
    """An OOB error as the screens write it: a percentage of rows for classes, a figure for regression."""
    return units.percent(v, 2) if task == "classes" and v is not None else _fmt(v, task)


def _err_iv(iv, task) -> str:
    if not iv or iv[0] is None:
        return "-"
    return f"{_err(iv[0], task)} – {_err(iv[1], task)}"


def _measure(name, v, task) -> str:
    return units.percent(v, 2) if name in SHARES and v is not None else _fmt(v, task)


def _measure_iv(name, iv, task) -> str:
    if not iv or iv[0] is None:
        return "-"
    return f"{_measure(name, iv[0], task)} – {_measure(name, iv[1], task)}"


def _stacked(value: str, interval: str) -> Raw:
    """A value with its interval below it, smaller: keeps a table of many intervals narrow."""
    return Raw(f'<span class="v">{_e(value)}</span><br><span class="ivl">{_e(interval)}</span>')


def _table(head, rows, classes=None, text_cols=(), nowrap=(), css="") -> str:
    """A table; text_cols: columns aligned left; nowrap: columns that never wrap (cells holding an
    interval never do); css: the table's class."""
    nowrap = set(nowrap)
    attr = f' class="{css}"' if css else ""
    out = [f'<div class="wide"><table{attr}>']
    if head:     # None: a table of label and value lines, no heads
        out += ["<thead><tr>", *(f'<th class="text">{_e(h)}</th>' if j in text_cols else f"<th>{_e(h)}</th>"
                                 for j, h in enumerate(head)), "</tr></thead>"]
    out.append("<tbody>")
    for i, row in enumerate(rows):
        cls = f' class="{classes[i]}"' if classes and classes[i] else ""
        cells = []
        for j, c in enumerate(row):
            kind = " ".join(k for k, on in (("text", j in text_cols),
                                            ("iv", j in nowrap or " – " in str(c))) if on)
            text = c if isinstance(c, Raw) else _e(c)
            cells.append(f'<td class="{kind}">{text}</td>' if kind else f"<td>{text}</td>")
        out.append(f"<tr{cls}>" + "".join(cells) + "</tr>")
    out.append("</tbody></table></div>")
    return "".join(out)


def _img(fig, name: str, png: bool = False) -> str:
    if png:
        data, kind = F.png_bytes(fig), "image/png"
    else:
        data, kind = F.svg_bytes(fig), "image/svg+xml"
    uri = f"data:{kind};base64," + base64.b64encode(data).decode("ascii")
    # the column's width for a full-width figure, a narrower one (the confusion map) in proportion
    share = min(100, round(100 * fig.get_figwidth() / F.WIDTH))
    return f'<img src="{uri}" alt="{_e(name)}" style="width: {share}%">'


def _figure(fig, name: str, caption: str, png: bool = False) -> str:
    return f'<figure id="fig-{_e(name)}">{_img(fig, name, png)}<figcaption>{_e(caption)}</figcaption></figure>'


def render(d: dict, oob) -> str:
    """The HTML text of the report from its figures (cli.report.figures) and the run's OOB view."""
    figs = F.all_figures(d, oob)
    try:
        return _page(d, figs)
    finally:
        F.close(figs.values())


def _page(d: dict, figs: dict) -> str:
    task = d["task"]
    labels = d.get("measure_labels", {})
    chosen = d.get("measure")
    parts = []
    title = f"baggr report: {d.get('target') or 'target'}"
    parts.append(f"<header><h1><span class=\"mark\">baggr</span> report</h1>"
                 f"<p class=\"sub\">{_e(d['path'])} &middot; {_e(d['status'])}"
                 f"{(' (' + _e(d['reason']) + ')') if d.get('reason') else ''}</p></header>")
    # headline tiles: the chosen measure first, then the error and the coverage
    tiles = []
    measures = d.get("measures") or {}
    if chosen in measures:
        m = measures[chosen]
        tiles.append((labels.get(chosen, chosen), _measure(chosen, m["value"], task),
                      "95% interval " + _measure_iv(chosen, m["interval"], task)))
    if chosen not in ("error", "mse"):
        what = "OOB error" if task == "classes" else "OOB MSE"
        tiles.append((what, _err(d["oob_error"], task), "95% interval " + _err_iv(d["interval"], task)))
    tiles.append(("members", f"{d['members']:,}", f"of {d['members_target']:,}" if d.get("members_target") else ""))
    # the size to choose: the chosen measure's where the run fitted one, else the error's
    m = measures.get(chosen) or {}
    needed = m.get("members_needed") if m.get("members_needed") is not None else d.get("members_needed")
    limit = m.get("limit") if m.get("limit") is not None else d.get("error_limit")
    if needed is not None and limit is not None:
        fmt = (lambda v: _measure(chosen, v, task)) if m.get("limit") is not None else (lambda v: _err(v, task))
        tiles.append(("members needed", f"{needed:,}", f"error limit {fmt(limit)}" if not m.get("limit") else f"limit {fmt(limit)}"))
    tiles.append(("rows judged", f"{d['covered']:,} of {d['rows']:,}", f"{d['uncovered']:,} never left out"))
    parts.append('<div class="headline">' + "".join(
        f'<div class="tile"><div class="k">{_e(k)}</div><div class="v">{_e(v)}</div><div class="iv">{_e(s)}</div></div>'
        for k, v, s in tiles) + "</div>")

    if measures:
        parts.append("<h2>Measures of the OOB predictions</h2>")
        rows, marks = [], []
        for name, m in measures.items():
            rows.append([labels.get(name, name), _measure(name, m["value"], task), _measure_iv(name, m["interval"], task),
                         m.get("method", "")])
            marks.append("chosen" if name == chosen else "")
        parts.append(_table(["measure", "value", "95% interval", "interval method"], rows, marks, text_cols=(3,)))
        if d.get("measure_notes"):
            parts.append("".join(f'<p class="sub">{_e(n)}</p>' for n in d["measure_notes"]))

    if "curve" in figs:
        parts.append("<h2>By ensemble size</h2>")
        parts.append(_figure(figs["curve"], "curve", CAPTIONS["curve"]))
    if "measure" in figs:
        parts.append(_figure(figs["measure"], "measure", CAPTIONS["measure"]))
    if d.get("curve"):
        from baggr.cli.report import curve_sizes
        rows = [[f"{m:,}", _err(d["curve"][m - 1], task), _err_iv(d["curve_interval"][m - 1], task)]
                for m in curve_sizes(d["members"])]
        parts.append(_table(["members", "OOB error" if task == "classes" else "OOB MSE", "95% interval"], rows))

    if task == "classes":
        parts.append("<h2>Per class</h2>")
        cm = {c["class"]: c for c in d.get("class_measures") or []}
        rows = []
        total = sum(d["class_rows"]) or 1
        for k, name in enumerate(d["classes"]):
            c = cm.get(str(name), {})
            cells = [_stacked(_fmt((c.get(x) or {}).get("value"), digits=3), _iv((c.get(x) or {}).get("interval"), digits=3))
                     for x in ("precision", "recall", "f1")]
            rows.append([name, f"{d['class_rows'][k]:,}", f"{100 * d['class_rows'][k] / total:.1f}%",
                         _stacked(_err(d["class_error"][k], task), _err_iv(d["class_interval"][k], task)), *cells])
        parts.append(_table(["class", "rows", "share", "OOB error", "precision", "recall", "F1"], rows,
                            nowrap=range(7), css="stacked"))
        parts.append('<p class="sub">Each figure with its 95% interval below it. Precision and recall: Wilson '
                     'intervals; F1: bootstrap over rows.</p>')
        if "confusion" in figs:
            parts.append(_figure(figs["confusion"], "confusion", CAPTIONS["confusion"]))
    if "reliability" in figs:
        parts.append("<h2>Reliability</h2>" if task == "classes" else "<h2>Predictions against targets</h2>")
        parts.append(_figure(figs["reliability"], "reliability",
                             CAPTIONS["reliability" if task == "classes" else "reliability-regression"],
                             png=task == "regression"))

    if d.get("importance"):
        parts.append("<h2>Feature importance</h2>")
        if "importance" in figs:
            parts.append(_figure(figs["importance"], "importance", CAPTIONS["importance"]))
        imp = {r["feature"]: r for r in d.get("impurity_decrease") or []}
        rows = [[r["feature"], _fmt(r["mean"]), _fmt(r["se"]),
                 _fmt((imp.get(r["feature"]) or {}).get("mean")), _fmt((imp.get(r["feature"]) or {}).get("se"))]
                for r in sorted(d["importance"], key=lambda r: -(r["mean"] or 0.0))]
        parts.append(_table(["feature", "permutation: mean rise", "SE", "impurity decrease", "SE"], rows))
        if d.get("importance_by_class"):
            parts.append("<h3>Permutation importance by class</h3>")
            parts.append(_class_importance(d))

    parts.append("<h2>Settings</h2>")
    # the settings with what the data chose in place of the unset ones (cli.settings_text.settings_json)
    default_measure = "mse" if task == "regression" else "error"
    parts.append(_table(["setting", "value"], [[k.replace("_", " "), f"{default_measure} (the default)"
                                                if k == "measure" and v is None else setting_text(v)]
                                               for k, v in d["config"].items()],
                        text_cols=(1,)))
    parts.append("<h2>Data</h2>")
    data = d.get("data") or {}
    rows = [["target", d.get("target") or "-"], ["rows", f"{d['rows']:,}"]]
    if data:
        rows += [["file", data.get("path")], ["bytes", f"{data.get('bytes'):,}" if data.get("bytes") else "-"],
                 ["SHA-256", data.get("sha256")]]
    if d.get("version"):
        rows.append(["made by", f"baggr {d['version']}, {d.get('created')}"])
    parts.append(_table(None, rows, text_cols=(1,)))

    parts.append('<h2>Read with care</h2><ul class="cautions">' +
                 "".join(f"<li>{_e(c)}</li>" for c in d.get("cautions") or []) + "</ul>")
    parts.append('<footer>Made by baggr from the run\'s own files; this page loads nothing from anywhere.</footer>')
    return page(title, "\n".join(parts))


def _class_importance(d: dict, most: int = 15, widest: int = 8) -> str:
    """Per class: the rise in that class's OOB error (mean over members, SE below), the features in the
    overall table's order; '' when the run has no per-class figures."""
    by = d.get("importance_by_class") or {}
    if not by:
        return ""
    classes = list(by)[:widest]
    order = [r["feature"] for r in sorted(d["importance"], key=lambda r: -(r["mean"] or 0.0))][:most]
    look = {c: {r["feature"]: r for r in by[c]} for c in classes}
    rows = [[f, *(_pm((look[c].get(f) or {}).get("mean"), (look[c].get(f) or {}).get("se")) for c in classes)]
            for f in order]
    more = []
    if len(by) > len(classes):
        more.append(f"{len(by) - len(classes)} more classes")
    if len(d["importance"]) > len(order):
        more.append(f"{len(d['importance']) - len(order)} more features")
    note = ("By class: the rise in the class's own OOB error (the share of its rows judged wrong) when the "
            "feature is shuffled, mean ± standard error over members"
            + (f"; {' and '.join(more)} in --json." if more else "."))
    return (_table(["feature", *(f"class {c}" for c in classes)], rows, nowrap=range(1, len(classes) + 1))
            + f'<p class="sub">{_e(note)}</p>')


def _pm(mean, se) -> Raw:
    if mean is None:
        return Raw("-")
    tail = "" if se is None else f' <span class="ivl">± {se:.3f}</span>'
    return Raw(f"{mean:.3f}{tail}")


def page(title: str, body: str, broad: bool = False) -> str:
    """The whole document around a body: the style inside, and a rule that lets the page load
    nothing but its own data: images."""
    main = '<main class="broad">' if broad else "<main>"
    return (f'<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
            f'<meta name="viewport" content="width=device-width, initial-scale=1">'
            f'<meta http-equiv="Content-Security-Policy" content="default-src \'none\'; img-src data:; '
            f'style-src \'unsafe-inline\'">'
            f"<title>{_e(title)}</title><style>{STYLE}</style></head>"
            f"<body>{main}\n{body}\n</main></body></html>\n")


def write_figures(d: dict, oob, folder) -> list:
    """Write every figure as PNG and SVG into folder; returns the paths written."""
    return save_figures(F.all_figures(d, oob), folder)


def save_figures(figs: dict, folder) -> list:
    """Write each {name: figure} as PNG and SVG into folder and close them; returns the paths written."""
    from pathlib import Path
    folder = Path(folder)
    out = []
    try:
        for name, fig in figs.items():
            for ext, data in (("svg", F.svg_bytes(fig)), ("png", F.png_bytes(fig, dpi=150))):
                p = folder / f"{name}.{ext}"
                p.write_bytes(data)
                out.append(p)
    finally:
        F.close(figs.values())
    return out
