"""The report as text for people: `baggr report DIR` and the end of `baggr demo`.

Its look: sections under a rule; label and value lines; each class as two lines, its error and
then where the OOB votes of its rows went (every count of the confusion matrix, read along its
row); the error by ensemble size as intervals drawn on one scale beside the figures. Shares are
percentages of rows (baggr.units); no line ends in spaces; nothing from the data is read as markup.
"""
from __future__ import annotations

import textwrap
from datetime import datetime

from rich.cells import cell_len
from rich.text import Text

from baggr import units
from baggr.cli import report_measures
from baggr.cli.report import curve_sizes

WIDEST = 100        # the text keeps to this many columns on a wide terminal
STRIP_MOST = 40     # cells of the interval strip


class Lines:
    """Prints lines as they are: wrapped here, to `width`, never padded by the console."""

    def __init__(self, console):
        self.console = console
        self.width = max(50, min(console.width or 80, WIDEST))

    def put(self, line="") -> None:
        t = line.copy() if isinstance(line, Text) else Text(str(line))
        t.rstrip()
        self.console.print(t, soft_wrap=True, highlight=False)

    def rule(self, title: str) -> None:
        self.put()
        t = Text("── ", style="dim")
        t.append(title, style="bold")
        t.append(" " + "─" * max(3, self.width - cell_len(title) - 4), style="dim")
        self.put(t)

    def pairs(self, rows, indent: int = 2) -> None:
        """Label / value lines: labels in a column, values wrapped with their own indent."""
        rows = [(k, v) for k, v in rows if v is not None]
        lw = max((cell_len(k) for k, _ in rows), default=0)
        room = max(20, self.width - indent - lw - 2)
        for k, v in rows:
            head = Text(" " * indent)
            head.append(k.ljust(lw), style="dim")
            head.append("  ")
            if isinstance(v, Text) and cell_len(v.plain) <= room:
                self.put(head + v)
                continue
            plain = v.plain if isinstance(v, Text) else str(v)
            parts = textwrap.wrap(plain, room, break_on_hyphens=False) or [""]
            self.put(head + Text(parts[0]))
            for p in parts[1:]:
                self.put(" " * (indent + lw + 2) + p)

    def hanging(self, first: Text, rest: str, indent: int) -> None:
        """`first` then `rest` wrapped to the width, continuation lines indented by `indent`."""
        room = max(20, self.width - indent)
        lead = cell_len(first.plain)
        words = textwrap.wrap(rest, max(10, self.width - lead), break_on_hyphens=False) or [""]
        self.put(first + Text(words[0]))
        tail = " ".join(words[1:])
        for p in textwrap.wrap(tail, room, break_on_hyphens=False) if tail else []:
            self.put(" " * indent + p)


def err_text(task, v) -> str:
    return units.value(v) if task == "regression" else units.percent(v, 2)


def span_text(task, iv) -> str:
    if not iv or iv[0] is None:
        return "-"
    return units.value_span(iv) if task == "regression" else units.percent_span(iv, 2)


def clock(t) -> str:
    return "-" if t is None else datetime.fromtimestamp(t).strftime("%Y-%m-%d %H:%M:%S")


def render_text(r, d: dict, console, settings=None) -> None:
    """Print the report of `r` from its figures `d` (baggr.cli.report.figures); settings: (label, text)
    pairs in the command's words (baggr.cli.settings_text), else the config's keys and values."""
    out = Lines(console)
    task = d["task"]
    what = "OOB error" if task == "classes" else "OOB MSE"
    latest = d.get("latest")
    ck = d.get("checkpoint")
    head = latest or d                   # the headline figures: the journal's latest line while it is ahead

    status = d["status"] + (f" ({d['reason']})" if d["reason"] else "")
    title = Text("baggr report", style="bold")
    title.append(f"  {d['path']}  ")
    title.append(status, style="bold")
    out.put(title)
    out.put()
    rows = []
    data = d["data"] or {}
    if data:
        shape = (f", {units.count(data.get('rows'))} rows x {data.get('features')} features"
                 if data.get("rows") else "")
        size = units.count(data.get("bytes")) if isinstance(data.get("bytes"), int) else data.get("bytes")
        rows += [("Data", f"{data.get('path')} ({size} bytes{shape})"), ("SHA-256", str(data.get("sha256")))]
    from baggr.cli.report import columns_text
    columns = columns_text(d)
    if columns:
        rows.append(("Columns", columns))
    kind = f"{len(d['classes'])} classes" if task == "classes" else "regression"
    missing = f"; {units.count(d['missing_target'])} rows without it left out" if d.get("missing_target") else ""
    rows.append(("Target", f"{d['target'] or '-'} ({kind}){missing}"))
    target = f" of {units.count(d['members_target'])}" if d["members_target"] else ""
    if latest:
        rows.append(("Members", f"{units.count(latest['members'])}{target} so far, "
                                f"{units.duration(latest['elapsed'])} of training (the journal's latest line, "
                                f"{clock(latest.get('t'))})"))
    else:
        rows.append(("Members", f"{units.count(d['members'])}{target}, trained in {units.duration(d['elapsed'])}"))
    if d["version"]:
        rows.append(("Made by", f"baggr {d['version']}, {d['created']}"))
    out.pairs(rows)

    n_rows = d["rows"]
    if latest:
        out.rule(f"Out-of-bag estimate at {units.count(latest['members'])} members (the journal's latest line)")
    else:
        out.rule("Out-of-bag estimate")
    headline = Text(err_text(task, head["oob_error"]), style="bold")
    headline.append(f"   95% interval {span_text(task, head['interval'])}")
    corrected = d.get("estimate") == "kept ensemble"
    if corrected:
        headline.append(f"   (the kept {units.count(head['members'])} members)", style="dim")
    est = [(what, headline)]
    if corrected:
        est += _estimate_rows(task, head)
    chosen = report_measures.headline(d)
    if chosen is not None:
        est[:0] = chosen
    if task == "regression":
        est.append(("R2", "-" if head.get("r2") is None else f"{head['r2']:.3f}"))
    if latest:
        est.append(("Rows judged", f"{units.percent(latest['coverage'])} of {units.count(n_rows)}"))
    else:
        est += _source_rows(d, n_rows)
    out.pairs(est)
    report_measures.render_measures(out, d)

    if task == "classes":
        _classes(out, d, head)

    if latest:
        out.rule(f"From the checkpoint at {units.count(ck['member'])} members (written {clock(ck.get('t'))})")
        out.pairs([("Members", f"{units.count(d['members'])}, {units.duration(d['elapsed'])} of training"),
                   *_source_rows(d, n_rows)])
    _curve(out, d, task, what, "(checkpoint)" if latest else "")
    report_measures.render_importance(out, d)

    out.rule("Settings")
    out.pairs(settings or [(k, str(v)) for k, v in d["config"].items()])

    out.rule("Read with care")
    for c in d["cautions"]:
        for i, p in enumerate(textwrap.wrap(c, out.width - 4, break_on_hyphens=False)):
            out.put(("  - " if i == 0 else "    ") + p)


def _estimate_rows(task: str, head: dict) -> list:
    """The textbook OOB figure, the estimated limit and the members needed to come near it."""
    raw = head.get("raw_error")
    rows = [("Textbook OOB", f"{err_text(task, raw)}   95% interval {span_text(task, head.get('raw_interval'))}"
                             "   (each row judged by its OOB members only: reads as a smaller ensemble)")]
    lim = head.get("error_limit")
    if lim is not None:
        rows.append(("Error limit", f"{err_text(task, lim)}   95% interval "
                                    f"{span_text(task, head.get('error_limit_interval'))}   (an unlimited ensemble)"))
        need = head.get("members_needed")
        tol = head.get("tolerance")
        near = f" (within {err_text(task, tol)} of the limit)" if tol is not None else " (near the limit)"
        rows.append(("Members needed", (f"{units.count(need)}" if need else "more than 4 million") + near))
    return rows


def _source_rows(d: dict, n_rows) -> list:
    """The figures only a model file or a checkpoint holds: rows never left out, members per row, settled at."""
    rows = [("Rows judged", f"{units.count(d['covered'])} of {units.count(n_rows)} ({units.percent(d['coverage'])}); "
                            f"{units.count(d['uncovered'])} never left out (not counted)")]
    if d["judged_per_row"] is not None:
        rows.append(("Members per row", f"{d['judged_per_row']:.1f} on average (of {units.count(d['members'])})"))
    s = d["settled_at"]
    rows.append(("Settled at", f"{units.count(s)} members: from there on the curve stayed within the final interval"
                 if s else "not yet: the curve's last points still leave the final interval"))
    return rows


def _classes(out: Lines, d: dict, head: dict) -> None:
    """Each class in two lines: its error, interval, rows and share; then how many of its rows were
    judged and where their OOB votes went (its row of the confusion matrix, in words)."""
    out.rule("Per class: OOB error, and where each class's votes went")
    classes = [str(c) for c in d["classes"]]
    total = sum(d["class_rows"]) or 1
    conf = head.get("confusion") or []
    nw = min(16, max(cell_len(c) for c in classes))
    n = len(classes)
    errs = [err_text("classes", e) for e in head["class_error"]]
    ivs = [span_text("classes", head["class_interval"][k] if k < len(head["class_interval"]) else None)
           for k in range(n)]
    rows = [units.count(d["class_rows"][k]) for k in range(n)]
    shares = [f"{100 * d['class_rows'][k] / total:.1f}%" for k in range(n)]
    ew, iw, rw, sw = (max(cell_len(x) for x in col) for col in (errs, ivs, rows, shares))
    for k, name in enumerate(classes):
        judged = head["class_covered"][k] if k < len(head["class_covered"]) else None
        lead = Text("  ")
        if cell_len(name) > nw:                  # a long name on a line of its own
            out.put(Text("  ") + Text(name, style="bold"))
            lead.append(" " * nw)
        else:
            lead.append(name.ljust(nw), style="bold")
        lead.append("  error ", style="dim")
        lead.append(errs[k].rjust(ew), style="bold")
        lead.append("  95% ", style="dim")
        lead.append(ivs[k].ljust(iw))
        lead.append(f"  {rows[k].rjust(rw)} rows  {shares[k].rjust(sw)} of all")
        out.put(lead)
        if k < len(conf):
            row = conf[k]
            votes = [f"{units.count(row[k])} right"] + [f"{units.count(c)} as {classes[j]}"
                                                        for j, c in enumerate(row) if j != k]
            first = Text(" " * (nw + 4)) + Text(f"{units.count(judged)} judged: ", style="dim")
            out.hanging(first, " · ".join(votes), nw + 6)


def _curve(out: Lines, d: dict, task: str, what: str, note: str) -> None:
    """The error at a few ensemble sizes, each beside its 95% interval drawn on one shared scale."""
    out.rule(f"{what} by ensemble size" + (f" {note}" if note else ""))
    sizes = curve_sizes(d["members"])
    raw = d.get("raw_curve") if d.get("estimate") == "kept ensemble" else None
    cells = [(units.count(m), err_text(task, d["curve"][m - 1]), span_text(task, d["curve_interval"][m - 1]),
              err_text(task, raw[m - 1]) if raw else "") for m in sizes]
    heads = ("members", what, "95% interval", "textbook" if raw else "")
    w = [max(cell_len(h), *(cell_len(c[i]) for c in cells)) for i, h in enumerate(heads)]
    used = 2 + w[0] + 2 + w[1] + 2 + w[2] + 3 + (w[3] + 2 if raw else 0)
    strip = min(STRIP_MOST, out.width - used)
    pts = [(d["curve_interval"][m - 1], d["curve"][m - 1]) for m in sizes]
    ends = [v for iv, c in pts for v in ((iv or [None, None]) + [c]) if v is not None]
    lo, hi = (min(ends), max(ends)) if ends else (0.0, 1.0)
    header = Text(f"  {'members'.rjust(w[0])}  {what.rjust(w[1])}  {'95% interval'.rjust(w[2])}"
                  + (f"  {heads[3].rjust(w[3])}" if raw else ""), style="dim")
    if strip >= 12 and ends:
        left, right = err_text(task, lo), err_text(task, hi)
        header.append("   " + left + " " * max(1, strip - cell_len(left) - cell_len(right)) + right, style="dim")
    out.put(header)
    for (m, e, s, r), (iv, c) in zip(cells, pts):
        line = Text(f"  {m.rjust(w[0])}  ")
        line.append(e.rjust(w[1]), style="bold")
        line.append(f"  {s.rjust(w[2])}")
        if raw:
            line.append(f"  {r.rjust(w[3])}", style="dim")
        if strip >= 12 and ends:
            line.append("   ")
            line.append_text(interval_strip(iv, c, lo, hi, strip))
        out.put(line)


def interval_strip(iv, value, lo: float, hi: float, width: int) -> Text:
    """One interval on a scale from lo to hi in `width` cells: ├──●──┤ (the dot: the value)."""
    def at(x):
        return 0 if hi <= lo else int(round((x - lo) / (hi - lo) * (width - 1)))
    cells = [" "] * width
    if iv and iv[0] is not None and iv[1] is not None:
        a, b = at(iv[0]), at(iv[1])
        for i in range(a, b + 1):
            cells[i] = "─"
        cells[a], cells[b] = "├", "┤"
    dot = None
    if value is not None:
        dot = at(value)
        cells[dot] = "●"
    t = Text("".join(cells).rstrip(), style="dim")
    if dot is not None:
        t.stylize("bold", dot, dot + 1)
    return t
