"""The report's figures, drawn with matplotlib (Agg: no display needed) in the project's own look.

Each function takes the report's figures (cli.report.figures) and, where it needs rows, the run's
OOB view, and returns a matplotlib Figure, or None when the run has nothing to draw for it.
The colours are the dashboard's (tui/widgets/palette.py), set on paper: ink for all rows, slate
for bands, the class colours in the same order.
"""
from __future__ import annotations

import numpy as np

INK = "#2b3038"            # all rows
SLATE = "#76808c"          # bands, the raw curve, guides
PAPER = "#fbfaf7"
DEEP = "#1f4f49"           # the dark end of the teal scales
GRID = "#e6e2d8"
CLASSES = ["#3f9c8f", "#c98f3c", "#8a76c4", "#c05c6b", "#5a94c8", "#8ea04a", "#b27ba6", "#6fae80"]
WIDTH = 7.6                # inches; at 100 dpi the figures fill the page's column


def class_colour(k: int) -> str:
    return CLASSES[k % len(CLASSES)]


def _pyplot():
    import matplotlib
    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt
    plt.rcParams.update({
        "figure.facecolor": PAPER, "axes.facecolor": PAPER, "savefig.facecolor": PAPER,
        "axes.edgecolor": SLATE, "axes.labelcolor": INK, "xtick.color": INK, "ytick.color": INK,
        "axes.spines.top": False, "axes.spines.right": False, "axes.grid": True, "grid.color": GRID,
        "grid.linewidth": 0.8, "axes.titlelocation": "left", "axes.titlesize": 11, "axes.titleweight": "bold",
        "axes.titlecolor": INK, "font.size": 9, "font.family": "DejaVu Sans", "legend.frameon": False,
        "svg.fonttype": "path", "svg.hashsalt": "baggr", "path.simplify": True,
    })
    return plt


def _figure(height: float, ncols: int = 1, **kw):
    plt = _pyplot()
    fig, ax = plt.subplots(1, ncols, figsize=(WIDTH, height), layout="constrained", **kw)
    return fig, ax


def _num(a):
    return np.array([np.nan if v is None else v for v in a], dtype=np.float64)


def _sizes_axis(ax, m: int) -> None:
    from matplotlib.ticker import FixedLocator, NullFormatter, NullLocator
    ax.set_xscale("log")
    ax.set_xlim(1, max(m, 2))
    ticks = [s * 10 ** e for e in range(0, 9) for s in (1, 2, 5) if s * 10 ** e <= max(m, 2)]
    if len(ticks) > 10:
        ticks = [t for t in ticks if str(t)[0] in "15"]
    ax.xaxis.set_major_locator(FixedLocator(ticks))
    ax.set_xticks(ticks, [f"{t:,}" for t in ticks])
    ax.xaxis.set_minor_locator(NullLocator())
    ax.xaxis.set_minor_formatter(NullFormatter())
    ax.set_xlabel("members (ensemble size, log scale)")


def percent_axis(ax, axis: str = "y") -> None:
    """Tick labels as percentages (shares read as percentages, as on the screens)."""
    from matplotlib.ticker import PercentFormatter
    getattr(ax, f"{axis}axis").set_major_formatter(PercentFormatter(1.0, decimals=None))


def _legend_below(fig, ax, n: int) -> None:
    """The legend under the plot, where it hides no line."""
    handles, labels = ax.get_legend_handles_labels()
    fig.legend(handles, labels, loc="outside lower center", ncols=min(n, 4), fontsize=8)


def curve(d: dict):
    """The OOB error (MSE) by ensemble size, with its 95% band, the raw curve where the estimate
    differs from it, and each class's curve."""
    c = _num(d.get("curve") or [])
    if c.shape[0] == 0:
        return None
    fig, ax = _figure(3.8)
    b = np.arange(1, c.shape[0] + 1)
    iv = np.array([[np.nan if v is None else v for v in row] for row in d.get("curve_interval") or []]).reshape(-1, 2)
    what = "OOB error" if d["task"] == "classes" else "OOB MSE"
    if iv.shape[0] == c.shape[0]:
        ax.fill_between(b, iv[:, 0], iv[:, 1], color=SLATE, alpha=0.22, linewidth=0, label="95% interval")
    raw = d.get("raw_curve")
    if raw:
        ax.plot(b, _num(raw), color=SLATE, linewidth=1.0, linestyle=(0, (4, 2)), label="raw OOB error")
    for k, name in enumerate(d.get("classes") or []):
        cc = np.array([row[k] if row[k] is not None else np.nan for row in d["class_curve"]], dtype=np.float64)
        ax.plot(b, cc, color=class_colour(k), linewidth=1.0, alpha=0.9, label=f"class {name}")
    ax.plot(b, c, color=INK, linewidth=1.8, label=f"{what}, all rows" + (" (estimated)" if raw else ""))
    marks = 0
    if d.get("error_limit") is not None:
        ax.axhline(d["error_limit"], color=INK, linewidth=0.8, linestyle=(0, (1, 2)), label="limit (unlimited ensemble)")
        marks += 1
    if d.get("members_needed") is not None and d["members_needed"] <= c.shape[0]:
        ax.axvline(d["members_needed"], color=SLATE, linewidth=0.9, linestyle=(0, (5, 3)),
                   label=f"members needed: {d['members_needed']:,}")
        marks += 1
    _sizes_axis(ax, c.shape[0])
    if d["task"] == "classes":
        percent_axis(ax)
    ax.set_ylabel(what)
    ax.set_title(f"{what} by ensemble size")
    _legend_below(fig, ax, 2 + len(d.get("classes") or []) + bool(raw) + marks)
    return fig


def measure_curve(d: dict, name: str):
    """One measure at the log-spaced sizes where the run computed it, with its 95% band."""
    mc = d.get("measure_curve") or {}
    sizes = mc.get("sizes") or []
    rows = mc.get(name)
    if not sizes or not rows:
        return None
    v = np.array([[np.nan if x is None else x for x in row] for row in rows], dtype=np.float64)
    fig, ax = _figure(2.8)
    s = np.asarray(sizes)
    ax.fill_between(s, v[:, 1], v[:, 2], color=SLATE, alpha=0.22, linewidth=0, label="95% interval")
    ax.plot(s, v[:, 0], color=INK, linewidth=1.8, marker="o", markersize=2.2, label=name)
    final = (d.get("measures") or {}).get(name) or {}
    if final.get("value") is not None:
        ax.plot([d["members"]], [final["value"]], marker="D", color=CLASSES[0], markersize=5, linestyle="none",
                label=f"at {d['members']} members")
    _sizes_axis(ax, max(d["members"], s[-1]))
    label = d.get("measure_labels", {}).get(name, name)
    if name in ("error", "balanced-error"):
        percent_axis(ax)
    ax.set_ylabel(label)
    ax.set_title(f"{label} by ensemble size (the measure this run is judged by)" if name == d.get("measure")
                 else f"{label} by ensemble size")
    _legend_below(fig, ax, 3)
    return fig


def importance(d: dict):
    """Permutation importance with 95% error bars (mean +- 1.96 SE over members), beside the
    impurity decrease."""
    perm = d.get("importance")
    if not perm:
        return None
    order = sorted(range(len(perm)), key=lambda i: -(perm[i]["mean"] or 0.0))[:30]
    names = [perm[i]["feature"] for i in order]
    fig, (a1, a2) = _figure(0.9 + 0.24 * len(order), ncols=2, sharey=True)
    y = np.arange(len(order))[::-1]
    for ax, rows, title, colour in ((a1, perm, "Permutation importance (OOB)", CLASSES[0]),
                                    (a2, d.get("impurity_decrease") or [], "Impurity decrease", CLASSES[1])):
        if not rows:
            ax.set_visible(False)
            continue
        mean = np.array([rows[i]["mean"] or 0.0 for i in order])
        se = np.array([rows[i]["se"] or 0.0 for i in order])
        ax.barh(y, mean, xerr=1.96 * se, color=colour, alpha=0.85, height=0.62,
                error_kw={"ecolor": INK, "elinewidth": 1.0, "capsize": 2})
        ax.axvline(0, color=SLATE, linewidth=0.8)
        ax.set_title(title)
        ax.grid(axis="y", visible=False)
    a1.set_yticks(y, names)
    a1.set_xlabel("rise in a member's OOB error" if d["task"] == "classes" else "rise in a member's OOB MSE")
    a2.set_xlabel("share of the root's impurity removed")
    return fig


def confusion(d: dict):
    """The confusion counts as a heat map: each row (true class) shaded by its shares."""
    cm = d.get("confusion")
    if not cm:
        return None
    from matplotlib.colors import LinearSegmentedColormap
    cm = np.asarray(cm, dtype=np.float64)
    names = [str(c) for c in d["classes"]]
    k = len(names)
    shares = cm / np.maximum(cm.sum(axis=1, keepdims=True), 1)
    side = min(WIDTH - 1.4, max(3.2, 1.6 + 0.62 * k))
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(side + 1.4, side), layout="constrained")
    cmap = LinearSegmentedColormap.from_list("baggr", [PAPER, CLASSES[0], DEEP])
    im = ax.imshow(shares, cmap=cmap, vmin=0, vmax=1)
    ax.grid(False)
    ax.set_xticks(range(k), names, rotation=45 if max(map(len, names)) > 6 else 0, ha="right" if
                  max(map(len, names)) > 6 else "center")
    ax.set_yticks(range(k), names)
    ax.set_xlabel("OOB prediction")
    ax.set_ylabel("true class")
    ax.set_title("Confusion")
    if k <= 12:
        for i in range(k):
            for j in range(k):
                ax.text(j, i, f"{int(cm[i, j]):,}", ha="center", va="center", fontsize=8,
                        color=PAPER if shares[i, j] > 0.55 else INK)
    fig.colorbar(im, ax=ax, shrink=0.8, label="share of row")
    return fig


def reliability(d: dict, oob):
    """Classes: the OOB share of each class against how often rows with that share were of the
    class (ten bins; point size by rows). Regression: OOB prediction against the target."""
    a = oob.arrays()
    if "target" not in a:
        return None
    y = np.asarray(a["target"])
    ok = oob.left_out > 0
    if not ok.any():
        return None
    if oob.task == "classes":
        shares = oob.shares[ok]
        y = y[ok]
        fig, ax = _figure(3.6)
        ax.plot([0, 1], [0, 1], color=SLATE, linewidth=1.0, linestyle=(0, (4, 2)), label="perfect calibration")
        classes = list(range(shares.shape[1]))
        if len(classes) == 2:
            classes = [1]   # two classes: the second class's share says all
        edges = np.linspace(0, 1, 11)
        for c in classes:
            s = shares[:, c]
            b = np.clip(np.digitize(s, edges[1:-1]), 0, 9)
            n = np.bincount(b, minlength=10)
            have = n > 0
            mean_s = np.bincount(b, weights=s, minlength=10)[have] / n[have]
            freq = np.bincount(b, weights=(y == c).astype(float), minlength=10)[have] / n[have]
            ax.plot(mean_s, freq, color=class_colour(c), linewidth=1.4)
            ax.scatter(mean_s, freq, s=12 + 120 * n[have] / n.max(), color=class_colour(c), alpha=0.85,
                       label=f"class {d['classes'][c]}", zorder=3)
        ax.set_xlim(0, 1)
        ax.set_ylim(0, 1)
        ax.set_xlabel("OOB share of the class (binned)")
        ax.set_ylabel("share of rows of that class")
        ax.set_title("Reliability of the OOB shares")
        ax.set_aspect("equal")
        ax.legend(loc="upper left", fontsize=8)
        return fig
    pred = np.asarray(oob.prediction)[ok]
    y = y[ok]
    fig, ax = _figure(3.8)
    if pred.shape[0] > 4000:
        from matplotlib.colors import LinearSegmentedColormap
        cmap = LinearSegmentedColormap.from_list("baggr", ["#cfe6e2", CLASSES[0], DEEP])
        ax.hexbin(y, pred, gridsize=60, cmap=cmap, mincnt=1, bins="log", linewidths=0)
    else:
        ax.scatter(y, pred, s=6, color=CLASSES[0], alpha=0.6, linewidths=0)
    lo, hi = float(min(y.min(), pred.min())), float(max(y.max(), pred.max()))
    ax.plot([lo, hi], [lo, hi], color=SLATE, linewidth=1.0, linestyle=(0, (4, 2)), label="prediction = target")
    ax.set_xlabel("target")
    ax.set_ylabel("OOB prediction")
    ax.set_title("OOB prediction against the target")
    ax.legend(loc="upper left", fontsize=8)
    return fig


def all_figures(d: dict, oob) -> dict:
    """{name: Figure} of every figure the run has, in the order the HTML report shows them."""
    out = {"curve": curve(d)}
    chosen = d.get("measure")
    if chosen and chosen not in ("error", "mse"):
        out["measure"] = measure_curve(d, chosen)
    out["importance"] = importance(d)
    out["confusion"] = confusion(d)
    out["reliability"] = reliability(d, oob)
    return {k: v for k, v in out.items() if v is not None}


def svg_bytes(fig) -> bytes:
    import io
    buf = io.BytesIO()
    fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None})
    return buf.getvalue()


def png_bytes(fig, dpi: int = 110) -> bytes:
    import io
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, metadata={"Software": None})
    return buf.getvalue()


def close(figs) -> None:
    plt = _pyplot()
    for f in figs:
        plt.close(f)

