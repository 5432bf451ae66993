"""95% intervals for the OOB error."""
from __future__ import annotations

import math

Z95 = 1.959963984540054  # the 0.975 quantile of the standard normal


def wilson(errors: int, n: int, z: float = Z95) -> tuple[float, float] | None:
    """Wilson's score interval for a misclassification rate (Wilson 1927); None when n is 0."""
    if n <= 0:
        return None
    p = errors / n
    denom = 1.0 + z * z / n
    centre = (p + z * z / (2 * n)) / denom
    half = z * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n)) / denom
    return (max(0.0, centre - half), min(1.0, centre + half))


def normal_mean(total: float, total_sq: float, n: float, z: float = Z95) -> tuple[float, float] | None:
    """Normal interval for a mean of per-row values (here squared errors) from their sum and sum of squares."""
    if n <= 0:
        return None
    mean = total / n
    var = max(0.0, total_sq / n - mean * mean) * (n / (n - 1) if n > 1 else 0.0)
    half = z * math.sqrt(var / n)
    return (max(0.0, mean - half), mean + half)
