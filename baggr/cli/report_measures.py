"""The report's measures, per-class precision, recall and F1, measure curves and feature importance:
their JSON (figures) and their rich tables (render_*)."""
from __future__ import annotations

import math

from baggr import units
from baggr.errors import ConfigError
from baggr.oob import importance as imp
from baggr.oob import measure_curve as mc
from baggr.oob import measures as ms

NOTES = {
    "log-loss": "Log loss smooths each row's OOB share of its class as (votes + 1/2) / (OOB votes + classes/2) "
                "(Krichevsky and Trofimov 1981), so a share of 0 costs a finite amount.",
    "brier": "Brier score: sum over classes of (share - 1 if the row's class else 0)^2, 0 to 2 (Brier 1950).",
    "auc": "AUC: of the second class's share for two classes, else the mean of one-vs-rest AUCs.",
}


def _f(v):
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def _pair(value, interval) -> dict:
    return {"value": _f(value), "interval": None if interval is None else [_f(interval[0]), _f(interval[1])]}


def chosen(r) -> str:
    try:
        return r.config.resolved_measure(r.task)
    except ConfigError:
        return ms.task_measures(r.task)[0]


def figures(r) -> dict:
    """The JSON part: measure, measures, class_measures, measure_curve and the importance lists."""
    oob = r.oob
    task = r.task
    raw = oob.raw_measures()            # the textbook OOB figures
    values = oob.measures()             # the estimate for the kept ensemble where there is one
    names = [n for n in ms.task_measures(task) if n in values]
    d = {"measure": chosen(r), "measures": {}, "measure_labels": {n: ms.LABELS[n] for n in ms.task_measures(task)},
         "measure_notes": [NOTES[n] for n in names if n in NOTES]}
    for n in names:
        # value/interval: the estimate for the kept ensemble; raw_*: the textbook OOB figure
        m = dict(_pair(*values[n]), method=ms.METHODS[n])
        if n in raw:
            rv = _pair(*raw[n])
            m.update(raw_value=rv["value"], raw_interval=rv["interval"])
        est = oob.measure_estimate(n) if oob.corrected else None
        m["corrected"] = est is not None
        if est is not None:
            m["raw_method"] = m["method"]
            m["method"] = ("kept ensemble: infinitesimal jackknife x 1.1, "
                           + ("Wilson" if n in ("error", "balanced-error") else "normal"))
            m.update(limit=_f(est["limit"]), limit_interval=_pair(0, est["limit_interval"])["interval"],
                     members_needed=est["members_needed"], tolerance=_f(est["tolerance"]))
        d["measures"][n] = m
    if any(not d["measures"][n]["corrected"] for n in names) and oob.corrected:
        d["measure_notes"].append("A measure marked textbook has no estimate for the kept ensemble (the AUC of "
                                  "three or more classes): its figure is the plain OOB one, which reads off for "
                                  "small ensembles.")
    ch = d["measures"].get(d["measure"])
    if ch is not None:
        d["measure_limit"], d["measure_limit_interval"] = ch.get("limit"), ch.get("limit_interval")
        d["measure_members_needed"] = ch.get("members_needed")
    if len(names) < len(ms.task_measures(task)):
        d["measure_notes"].append("This model file was written before the targets were stored beside the OOB "
                                  "votes: only the error is available.")
    if task == "classes":
        t = ms.class_table(oob.confusion)
        d["class_measures"] = [{"class": str(name), **{k: dict(_pair(*t[k][i]), method=ms.METHODS[k])
                                                       for k in ("precision", "recall", "f1")}}
                               for i, name in enumerate(r.schema.classes)]
    sizes, curves = mc.curve_of(oob)
    if sizes:
        d["measure_curve"] = {"sizes": sizes, **{n: [[_f(x) for x in row] for row in v] for n, v in curves.items()}}
        # the textbook OOB figures at the same sizes
        d["measure_curve"]["raw"] = {n: [[_f(x) for x in row] for row in v] for n, v in mc.curve_of(oob, raw=True)[1].items()}
    s = imp.summary(oob.arrays(), list(r.schema.names), list(r.schema.classes) if task == "classes" else None)
    if s is not None:
        d["importance"] = s["permutation"]
        d["importance_members"] = s["members"]
        d["impurity_decrease"] = s["impurity"]
        if "class_permutation" in s:
            d["importance_by_class"] = s["class_permutation"]
    return d


def measure_text(name: str, v) -> str:
    """A measure's value as the report text writes it: errors as percentages of rows, the rest as figures."""
    if v is None:
        return "-"
    if name in ("error", "balanced-error"):
        return units.percent(v, 2)
    return f"{v:.4f}" if name in ("log-loss", "brier", "auc", "precision", "recall", "f1", "r2") else units.value(v)


def measure_span(name: str, iv) -> str:
    if not iv or iv[0] is None:
        return "-"
    if name in ("error", "balanced-error"):
        return units.percent_span(iv, 2)
    return f"{measure_text(name, iv[0])}-{measure_text(name, iv[1])}"


def headline(d: dict):
    """[(label, Text)] of the chosen measure for the estimate's lines, when it is not the error itself:
    its estimate for the kept ensemble, the textbook figure, its limit and the members needed."""
    from rich.text import Text
    name = d.get("measure")
    m = (d.get("measures") or {}).get(name)
    if name in (None, "error", "mse") or not m:
        return None
    label = d["measure_labels"].get(name, name)
    t = Text(measure_text(name, m["value"]), style="bold")
    t.append(f"   95% interval {measure_span(name, m['interval'])}  (the measure this run is judged by"
             + (", for the kept ensemble)" if m.get("corrected") else "; textbook OOB figure)"))
    rows = [(label, t)]
    if m.get("corrected"):
        if m.get("raw_value") is not None:
            rows.append((f"{label}, textbook", f"{measure_text(name, m['raw_value'])}   95% interval "
                                               f"{measure_span(name, m.get('raw_interval'))}"))
        if m.get("limit") is not None:
            rows.append((f"{label}, limit", f"{measure_text(name, m['limit'])}   95% interval "
                                            f"{measure_span(name, m.get('limit_interval'))}   (an unlimited ensemble)"))
            need = m.get("members_needed")
            near = f" (within {measure_text(name, m['tolerance'])} of its limit)" if m.get("tolerance") else ""
            rows.append((f"{label}, members needed", (units.count(need) if need else "more than 4 million") + near))
    return rows


def render_measures(out, d: dict) -> None:
    """The measures with their intervals and methods; for classes, precision, recall and F1 by class.
    out: report_text.Lines."""
    from rich.cells import cell_len
    from rich.text import Text
    if not d.get("measures"):
        return
    out.rule("Measures of the OOB predictions")
    names = list(d["measures"])
    labels = [d["measure_labels"].get(n, n) for n in names]
    vals = [measure_text(n, d["measures"][n]["value"]) for n in names]
    ivs = [measure_span(n, d["measures"][n]["interval"]) for n in names]
    lw, vw, iw = (max(cell_len(x) for x in col) for col in (labels, vals, ivs))
    for n, lab, v, iv in zip(names, labels, vals, ivs):
        line = Text("  ")
        line.append(lab.ljust(lw), style="bold" if n == d.get("measure") else "dim")
        line.append("  ")
        line.append(v.rjust(vw), style="bold")
        line.append(f"  95% {iv.ljust(iw)}  ")
        line.append(d["measures"][n].get("method", ""), style="dim")
        out.put(line)
    for note in d.get("measure_notes") or []:
        out.hanging(Text("  "), note, 2)
    if d["task"] != "classes" or not d.get("class_measures"):
        return
    out.rule("Precision, recall and F1 by class")
    classes = [c["class"] for c in d["class_measures"]]
    nw = min(16, max(5, *(cell_len(c) for c in classes)))
    cells = [[f"{c[k]['value']:.3f}" if c[k]["value"] is not None else "-",
              "-" if not c[k]["interval"] or c[k]["interval"][0] is None
              else f"{c[k]['interval'][0]:.3f}-{c[k]['interval'][1]:.3f}"] for c in d["class_measures"]
             for k in ("precision", "recall", "f1")]
    labels = ("precision", "recall", "F1")
    iw = max(3, *(cell_len(x[1]) for x in cells))
    vw = [max(cell_len(lab), *(cell_len(cells[3 * i + j][0]) for i in range(len(classes))))
          for j, lab in enumerate(labels)]
    head = Text(f"  {'class'.ljust(nw)}", style="dim")
    for j, lab in enumerate(labels):
        head.append(f"  {lab.ljust(vw[j])} {'95%'.ljust(iw)}")
    out.put(head)
    for i, c in enumerate(d["class_measures"]):
        line = Text("  ")
        line.append(c["class"][:nw].ljust(nw), style="bold")
        for j in range(3):
            v, iv = cells[3 * i + j]
            line.append("  ")
            line.append(v.ljust(vw[j]), style="bold")
            line.append(" " + iv.ljust(iw))
        out.put(line)
    out.hanging(Text("  "), "Precision and recall: Wilson intervals; F1: a bootstrap over rows.", 2)


def render_importance(out, d: dict, most: int = 25) -> None:
    """Permutation importance beside the impurity decrease, largest first. out: report_text.Lines."""
    from rich.cells import cell_len
    from rich.text import Text
    if not d.get("importance"):
        return
    out.rule(f"Feature importance ({units.count(d.get('importance_members', 0))} members)")
    dec = {r["feature"]: r for r in d.get("impurity_decrease") or []}
    rows = sorted(d["importance"], key=lambda r: -(r["mean"] if r["mean"] is not None else -math.inf))[:most]
    fw = min(24, max(cell_len(r["feature"]) for r in rows))
    rise = "rise in OOB error" if d["task"] == "classes" else "rise in OOB MSE"
    out.put(Text(f"  {'feature'.ljust(fw)}  {rise:>18}  {'SE':>9}  {'mean/SE':>7}  {'impurity decrease':>18}  "
                 f"{'SE':>9}", style="dim"))
    for r in rows:
        z = r["mean"] / r["se"] if r["mean"] is not None and r["se"] else None
        other = dec.get(r["feature"]) or {}
        line = Text("  ")
        line.append(r["feature"][:fw].ljust(fw), style="bold")
        line.append(f"  {_num(r['mean']):>18}  {_num(r['se']):>9}  {'-' if z is None else f'{z:.1f}':>7}  "
                    f"{_num(other.get('mean')):>18}  {_num(other.get('se')):>9}")
        out.put(line)
    if len(d["importance"]) > most:
        out.put(Text(f"  ... {len(d['importance']) - most} more in --json", style="dim"))
    _class_importance(out, d, [r["feature"] for r in rows][:12])
    out.hanging(Text("  "), "Permutation: each member's OOB rows sent down again with the feature's values "
                "shuffled among them (Breiman 2001). Impurity decrease: from the nodes; biased toward features "
                "with many distinct values (Strobl et al. 2007).", 2)


def _num(v) -> str:
    return "-" if v is None else f"{v:.4g}"


def _class_importance(out, d: dict, features: list) -> None:
    """The rise in each class's own OOB error, mean ± SE, for the leading features: as many classes
    as the width holds (the rest in --json)."""
    from rich.cells import cell_len
    from rich.text import Text
    by = d.get("importance_by_class") or {}
    if not by or not features:
        return
    look = {c: {r["feature"]: r for r in rows} for c, rows in by.items()}
    cells = {c: [_pm((look[c].get(f) or {}).get("mean"), (look[c].get(f) or {}).get("se")) for f in features]
             for c in by}
    fw = min(24, max(8, *(cell_len(f) for f in features)))
    widths, used = [], 2 + fw
    for c in by:
        w = max(cell_len(c), *(cell_len(x) for x in cells[c]))
        if used + 2 + w > out.width:
            break
        widths.append((c, w))
        used += 2 + w
    out.put()
    head = Text(f"  {'by class'.ljust(fw)}", style="dim")
    for c, w in widths:
        head.append("  " + c[:w].rjust(w), style="dim")
    out.put(head)
    for i, f in enumerate(features):
        line = Text("  ")
        line.append(f[:fw].ljust(fw), style="bold")
        for c, w in widths:
            line.append("  " + cells[c][i].rjust(w))
        out.put(line)
    left = len(by) - len(widths)
    out.hanging(Text("  "), "By class: the rise in the class's own OOB error, mean ± SE over members"
                + (f"; {left} more classes in --json." if left else "."), 2)


def _pm(mean, se) -> str:
    if mean is None:
        return "-"
    return f"{mean:.3f}" + ("" if se is None else f" ± {se:.3f}")


def cautions(d: dict) -> list[str]:
    """The importance's cautions, when the run measured it."""
    return list(imp.CAUTIONS) if d.get("importance") else []
