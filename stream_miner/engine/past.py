"""Baskets that already left the window, kept while a later comparison may need them.

Each basket keeps a position: for a count window the number of baskets that had left the
window before it (so the window at any tick is a range of positions), for a time window its
event time. :meth:`PastBaskets.count` counts itemsets exactly over a range of positions;
:meth:`PastBaskets.keep` drops every basket outside the range still needed.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from stream_miner.engine.baskets import BasketArrays
from stream_miner.engine.counting import count_itemsets


class PastBaskets:
    """Expired baskets (item ids) with their positions, in the order they left."""

    def __init__(self, baskets: BasketArrays | None = None, positions: np.ndarray | None = None) -> None:
        self._parts: list[tuple[BasketArrays, np.ndarray]] = []
        if baskets is not None and positions is not None and len(baskets):
            self._parts.append((baskets, positions.astype(np.float64)))

    def __len__(self) -> int:
        return sum(len(b) for b, _ in self._parts)

    def append(self, baskets: BasketArrays, positions: np.ndarray) -> None:
        """Keep ``baskets`` at ``positions`` (one per basket)."""
        if len(baskets):
            self._parts.append((baskets, positions.astype(np.float64)))

    def contents(self) -> tuple[BasketArrays, np.ndarray]:
        """Every kept basket and its position, in the order they left (one batch)."""
        if not self._parts:
            return BasketArrays.empty(), np.empty(0)
        if len(self._parts) > 1:
            baskets = BasketArrays.concat([b for b, _ in self._parts])
            self._parts = [(baskets, np.concatenate([p for _, p in self._parts]))]
        return self._parts[0]

    def count(
        self, itemsets: Sequence[Sequence[int | None]], low: float, high: float, *, timed: bool = False
    ) -> list[int]:
        """Exact counts of ``itemsets`` (item ids) over the kept baskets in the span (see
        :func:`in_span`)."""
        baskets, positions = self.contents()
        return count_itemsets(baskets.select(np.flatnonzero(in_span(positions, low, high, timed))), itemsets)

    def keep(self, low: float, high: float, *, timed: bool = False) -> None:
        """Drop every basket whose position lies outside the span (see :func:`in_span`)."""
        baskets, positions = self.contents()
        chosen = in_span(positions, low, high, timed)
        if not chosen.all():
            rows = np.flatnonzero(chosen)
            self._parts = [(baskets.select(rows), positions[rows])] if rows.size else []


def in_span(positions: np.ndarray, low: float, high: float, timed: bool) -> np.ndarray:
    """Which positions lie in a window's span: [low, high) of basket numbers, or with
    ``timed`` (low, high] of event times (a time window ending at T holds (T - length, T])."""
    if timed:
        return (positions > low) & (positions <= high)
    return (positions >= low) & (positions < high)
