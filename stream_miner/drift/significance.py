"""Tests that a pattern's change between a baseline window and the current one is real.

- :func:`proportion_p`: the one-sided two-proportion z-test,
  z = (p2 - p1) / sqrt(p (1 - p) (1/n1 + 1/n2)) with the pooled p (standard statistics).
- :func:`odds_ratio_p`: the one-sided test that the odds ratio of a 2x2 table grew, on the
  log odds ratio with its standard error sqrt(sum of 1/cell) (Woolf 1955, "On estimating the
  relation between blood group and disease"; 0.5 is added to every cell, Haldane 1956). The
  odds ratio does not move when one item merely gets more popular, which makes it the test
  of a change in association rather than in popularity.
- :func:`benjamini_hochberg`: adjusted p-values controlling the false discovery rate across
  every pattern tested at one tick (Benjamini & Hochberg 1995).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

UP, DOWN = 1, -1


def _one_sided(z: float, direction: int) -> float:
    """P(Z >= z) for ``UP``, P(Z <= z) for ``DOWN``, Z standard normal."""
    return 0.5 * math.erfc(direction * z / math.sqrt(2.0))


def proportion_p(x1: int, n1: int, x2: int, n2: int, direction: int) -> float:
    """p-value of "the share x2/n2 is above (``UP``) or below (``DOWN``) the share x1/n1".

    >>> round(proportion_p(50, 1000, 80, 1000, UP), 4)  # z = 2.721 (pooled share 0.065)
    0.0033
    """
    if n1 <= 0 or n2 <= 0:
        return 1.0
    pooled = (x1 + x2) / (n1 + n2)
    spread = pooled * (1.0 - pooled) * (1.0 / n1 + 1.0 / n2)
    if spread <= 0.0:
        return 1.0  # both shares 0 or both 1: no change at all
    return _one_sided((x2 / n2 - x1 / n1) / math.sqrt(spread), direction)


def log_odds_ratio(both: int, left: int, right: int, n: int) -> tuple[float, float]:
    """The log odds ratio of the 2x2 table of two item sets (``both`` baskets hold both,
    ``left`` and ``right`` hold each side, ``n`` in all) and its variance, 0.5 added per cell."""
    cells = (both, left - both, right - both, n - left - right + both)
    a, b, c, d = (cell + 0.5 for cell in cells)
    return math.log(a * d / (b * c)), 1 / a + 1 / b + 1 / c + 1 / d


def odds_ratio_p(
    before: tuple[int, int, int, int], after: tuple[int, int, int, int], direction: int
) -> float:
    """p-value of "the association grew (``UP``) or shrank (``DOWN``)" between two tables,
    each given as (both, left, right, n) for :func:`log_odds_ratio`."""
    log1, var1 = log_odds_ratio(*before)
    log2, var2 = log_odds_ratio(*after)
    return _one_sided((log2 - log1) / math.sqrt(var1 + var2), direction)


def benjamini_hochberg(p_values: Sequence[float], tests: int | None = None) -> list[float]:
    """Adjusted p-values (step-up; compare each with the false discovery rate). ``tests``
    (at least ``len(p_values)``) counts hypotheses tested but not listed, whose p-values are
    taken as 1 (they never lead to a discovery, but they raise the bar for the rest).

    >>> [round(p, 3) for p in benjamini_hochberg([0.01, 0.04, 0.03, 0.2])]
    [0.04, 0.053, 0.053, 0.2]
    >>> [round(p, 3) for p in benjamini_hochberg([0.01, 0.04], tests=4)]
    [0.04, 0.08]
    """
    m = max(len(p_values), tests or 0)
    order = sorted(range(len(p_values)), key=lambda i: p_values[i])
    adjusted = [1.0] * len(p_values)
    running = 1.0
    for rank in range(len(p_values), 0, -1):
        i = order[rank - 1]
        running = min(running, p_values[i] * m / rank)
        adjusted[i] = running
    return adjusted
