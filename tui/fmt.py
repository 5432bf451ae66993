"""Number and time formats shared by the panels."""
from __future__ import annotations


def duration(s: float | None) -> str:
    """Seconds as a short clock: 42s, 3m 05s, 2h 10m, 3d 04h."""
    if s is None:
        return "-"
    s = max(0.0, float(s))
    if s < 60:
        return f"{s:.0f}s" if s >= 10 else f"{s:.1f}s"
    m, sec = divmod(int(s), 60)
    if m < 60:
        return f"{m}m {sec:02d}s"
    h, m = divmod(m, 60)
    if h < 48:
        return f"{h}h {m:02d}m"
    d, h = divmod(h, 24)
    return f"{d}d {h:02d}h"


def pct(x: float | None, digits: int = 1) -> str:
    """A share as a percentage: 0.1534 -> 15.3%."""
    return "-" if x is None else f"{100 * x:.{digits}f}%"


def num(x: float | None) -> str:
    """A figure of any scale with four significant digits."""
    if x is None:
        return "-"
    return f"{x:.4g}"


def span(iv, percent: bool, digits: int = 1) -> str:
    """An interval as lo-hi."""
    if not iv:
        return "-"
    lo, hi = iv
    if percent:
        return f"{100 * lo:.{digits}f}-{100 * hi:.{digits}f}%"
    return f"{lo:.4g}-{hi:.4g}"


def size(n: float | None) -> str:
    """Bytes as MB or GB."""
    if n is None:
        return "-"
    if n >= 1 << 30:
        return f"{n / (1 << 30):.2f} GB"
    return f"{n / (1 << 20):.0f} MB"


def count(n) -> str:
    return "-" if n is None else f"{n:,}"
