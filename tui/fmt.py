"""Number and time formats shared by the panels: those of baggr.units (the same on every surface), and sizes."""
from __future__ import annotations

from baggr.units import count, duration, pace, percent, percent_span, value, value_span

__all__ = ["count", "duration", "num", "pace", "pct", "size", "span"]


def pct(x: float | None, digits: int = 1) -> str:
    """A share as a percentage: 0.1534 -> 15.3%."""
    return percent(x, digits)


def num(x: float | None) -> str:
    """A figure of any scale with four significant digits."""
    return value(x)


def span(iv, percent: bool, digits: int = 1) -> str:
    """An interval as lo-hi (percentages of shares, or figures)."""
    return percent_span(iv, digits) if percent else value_span(iv)


def size(n: float | None) -> str:
    """Bytes as MB or GB."""
    if n is None:
        return "-"
    if n >= 1 << 30:
        return f"{n / (1 << 30):.2f} GB"
    return f"{n / (1 << 20):.0f} MB"
