"""The figures of a comparison (`baggr report COMPARISON_DIR --html/--figures`), drawn like a run's
(cli/figures.py): every candidate's estimated curve overlaid, the chosen measure's curves, and each
candidate's paired difference to the best with its interval.

Each function takes the comparison's ranked candidates (cli.compare_report) and, per candidate in the
same order, that run's report figures (cli.report.figures, or None while it has none); colours
follow the rank, so the best is the first class colour in every figure.
"""
from __future__ import annotations

import numpy as np

from baggr.cli import figures as F

SHARES = ("error", "balanced-error")     # drawn and written as percentages


def colour(rank: int) -> str:
    return F.class_colour(rank)


def name(c: dict, rank: int) -> str:
    return f"c{c['number']} {c['terse']}" + (" (best)" if rank == 0 and c.get("value") is not None else "")


def _tail_limits(ax, series, members: int) -> None:
    """y limits that fit every line and band from a tenth of the ensemble on: a small ensemble's
    figure is far off the rest and would flatten the part where the candidates differ."""
    lo, hi = np.inf, -np.inf
    start = max(1, members // 10)
    for b, *ys in series:
        keep = b >= start
        for y in ys:
            v = y[keep][np.isfinite(y[keep])]
            if v.shape[0]:
                lo, hi = min(lo, v.min()), max(hi, v.max())
    if np.isfinite(lo) and hi > lo:
        pad = 0.08 * (hi - lo)
        ax.set_ylim(lo - pad, hi + pad)


def curves(cands: list, runs: list, task: str):
    """The estimated error (MSE) of each candidate's kept ensemble by size, with its 95% band."""
    have = [(i, c, d) for i, (c, d) in enumerate(zip(cands, runs)) if d and d.get("curve")]
    if not have:
        return None
    fig, ax = F._figure(4.2)
    series, members = [], 1
    for i, c, d in have:
        y = F._num(d["curve"])
        b = np.arange(1, y.shape[0] + 1)
        iv = np.array([[np.nan if v is None else v for v in row] for row in d.get("curve_interval") or []])
        if iv.shape == (y.shape[0], 2):
            ax.fill_between(b, iv[:, 0], iv[:, 1], color=colour(i), alpha=0.16 if i == 0 else 0.06, linewidth=0)
            series.append((b, y, iv[:, 0], iv[:, 1]))
        else:
            series.append((b, y))
        ax.plot(b, y, color=colour(i), linewidth=2.0 if i == 0 else 1.3, label=name(c, i))
        members = max(members, y.shape[0])
    F._sizes_axis(ax, members)
    _tail_limits(ax, series, members)
    what = "OOB error" if task == "classes" else "OOB MSE"
    if task == "classes":
        F.percent_axis(ax)
    ax.set_ylabel(what)
    ax.set_title(f"{what} by ensemble size, every candidate")
    F._legend_below(fig, ax, min(3, len(have)))
    return fig


def measure_curves(cands: list, runs: list, measure: str, label: str):
    """The chosen measure of each candidate at the sizes where its run computed it, with its band."""
    have = []
    for i, (c, d) in enumerate(zip(cands, runs)):
        mc = (d or {}).get("measure_curve") or {}
        if mc.get("sizes") and mc.get(measure):
            have.append((i, c, np.asarray(mc["sizes"]),
                         np.array([[np.nan if x is None else x for x in row] for row in mc[measure]])))
    if not have:
        return None
    fig, ax = F._figure(3.8)
    series, members = [], 1
    for i, c, s, v in have:
        ax.fill_between(s, v[:, 1], v[:, 2], color=colour(i), alpha=0.16 if i == 0 else 0.06, linewidth=0)
        ax.plot(s, v[:, 0], color=colour(i), linewidth=2.0 if i == 0 else 1.3, marker="o", markersize=1.8,
                label=name(c, i))
        series.append((s, v[:, 0], v[:, 1], v[:, 2]))
        members = max(members, int(s[-1]))
    F._sizes_axis(ax, members)
    _tail_limits(ax, series, members)
    if measure in SHARES:
        F.percent_axis(ax)
    ax.set_ylabel(label)
    ax.set_title(f"{label} by ensemble size, every candidate")
    F._legend_below(fig, ax, min(3, len(have)))
    return fig


def differences(cands: list, measure: str, label: str):
    """Each candidate's paired difference to the best (candidate minus best, on the rows both judged)
    with its 95% interval, best at the top; hollow where the adjusted p-value is 0.05 or more."""
    rows = [(i, c) for i, c in enumerate(cands) if c.get("value") is not None]
    if len(rows) < 2:
        return None
    fig, ax = F._figure(0.9 + 0.32 * len(rows))
    y = np.arange(len(rows))[::-1]
    for (i, c), yy in zip(rows, y):
        if i == 0:
            ax.plot([0], [yy], marker="D", color=colour(0), markersize=5, linestyle="none")
            continue
        d, iv = c.get("difference"), c.get("difference_interval")
        if d is None:
            continue
        if iv and iv[0] is not None and iv[1] is not None:
            ax.plot([iv[0], iv[1]], [yy, yy], color=colour(i), linewidth=1.8, solid_capstyle="butt")
        close = bool(c.get("close"))
        ax.plot([d], [yy], marker="o", markersize=5.5, linestyle="none", color=colour(i),
                markerfacecolor=F.PAPER if close else colour(i), markeredgewidth=1.4)
    ax.axvline(0, color=F.SLATE, linewidth=0.9, linestyle=(0, (4, 2)))
    ax.set_yticks(y, [name(c, i) for i, c in rows])
    ax.grid(axis="y", visible=False)
    if measure in SHARES:
        F.percent_axis(ax, "x")
    ax.set_xlabel(f"{label}: candidate minus best, same rows (95% interval)")
    ax.set_title("Paired with the best")
    return fig


def all_figures(cands: list, runs: list, measure: str, task: str, label: str) -> dict:
    """{name: Figure} of every figure the comparison has, in the order its HTML page shows them."""
    out = {"curves": curves(cands, runs, task)}
    if measure not in ("error", "mse"):
        out["measures"] = measure_curves(cands, runs, measure, label)
    out["differences"] = differences(cands, measure, label)
    return {k: v for k, v in out.items() if v is not None}
