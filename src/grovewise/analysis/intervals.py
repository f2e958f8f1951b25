"""Confidence intervals for shares of rows (fidelity, agreement).

The Wilson score interval (Wilson, E. B. (1927), "Probable inference, the law of succession,
and statistical inference", JASA 22:209-212) keeps within [0, 1] and behaves well for small
counts and shares near 0 or 1, where the normal approximation does not.
"""

from __future__ import annotations

import math

Z95 = 1.959963984540054  # the standard normal's 97.5% quantile


def wilson_interval(successes: int, n: int, z: float = Z95) -> tuple[float, float] | None:
    """The Wilson score interval for ``successes`` of ``n`` (95% by default); None for n = 0."""
    if n <= 0:
        return None
    p = successes / n
    z2 = z * z
    centre = (p + z2 / (2 * n)) / (1 + z2 / n)
    half = z / (1 + z2 / n) * math.sqrt(p * (1 - p) / n + z2 / (4 * n * n))
    return max(0.0, centre - half), min(1.0, centre + half)
