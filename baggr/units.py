"""How figures are written for people, the same on every surface (dashboard, progress lines, report).

Shares (error rates, coverage) read as percentages wherever a person reads them; JSON keeps
fractions. A pace is members per second in plain digits, never in exponent form. Pure Python:
the dashboard imports this.
"""
from __future__ import annotations

import math


def _finite(x) -> bool:
    return x is not None and isinstance(x, (int, float)) and math.isfinite(x)


def percent(x: float | None, digits: int = 2) -> str:
    """A share as a percentage: 0.13881 -> '13.88%'; '-' when unknown."""
    return f"{100 * x:.{digits}f}%" if _finite(x) else "-"


def percent_span(iv, digits: int = 1) -> str:
    """An interval of shares as one percentage range: (0.121, 0.156) -> '12.1-15.6%'."""
    if not iv or not _finite(iv[0]) or not _finite(iv[1]):
        return "-"
    return f"{100 * iv[0]:.{digits}f}-{100 * iv[1]:.{digits}f}%"


def value(x: float | None) -> str:
    """A figure of any scale (an MSE, an R2) with four significant digits, no exponent below 1e6."""
    if not _finite(x):
        return "-"
    if x != 0 and (abs(x) >= 1e6 or abs(x) < 1e-4):
        return f"{x:.3e}"
    return f"{x:.4g}" if abs(x) < 1e4 else f"{x:,.0f}"


def value_span(iv) -> str:
    if not iv or not _finite(iv[0]) or not _finite(iv[1]):
        return "-"
    return f"{value(iv[0])}-{value(iv[1])}"


def pace_number(rate: float | None) -> str:
    """Members a second with three significant digits in plain digits: 1,603 / 144 / 14.4 / 1.44 / 0.144."""
    if not _finite(rate) or rate <= 0:
        return "-"
    if rate >= 100:
        return f"{rate:,.0f}"
    if rate >= 10:
        return f"{rate:.1f}"
    if rate >= 1:
        return f"{rate:.2f}"
    return f"{rate:.{2 - math.floor(math.log10(rate))}f}"


def pace(rate: float | None) -> str:
    """'14.4 members/s' ('-' when unknown)."""
    n = pace_number(rate)
    return "-" if n == "-" else f"{n} members/s"


def duration(s: float | None) -> str:
    """Seconds as a short clock: 4.2s, 42s, 3m 05s, 2h 10m, 3d 04h ('-' when unknown)."""
    if not _finite(s):
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


def short_time(s: float | None) -> str:
    """A short span to three figures: 0.42 ms, 12.7 ms, 1.23 s ('-' when unknown)."""
    if not _finite(s):
        return "-"
    s = float(s)
    if s < 1.0:
        return f"{s * 1000:.3g} ms"
    return f"{s:.3g} s"


def count(n) -> str:
    """A whole number with thousands separators ('-' when unknown)."""
    return "-" if n is None else f"{int(n):,}"
