"""What to mine: support threshold, itemset length, item lists and rule filters."""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction

from stream_miner.engine.rules import RuleFilter


@dataclass(frozen=True)
class MiningParams:
    """What to mine: a support threshold (fraction of the window, or absolute count),
    a maximum itemset length, item include/exclude lists, and optional rule filters."""

    min_support: Fraction | None = None
    min_count: int | None = None
    max_len: int | None = None
    include: frozenset[str] | None = None
    exclude: frozenset[str] = frozenset()
    rules: RuleFilter | None = None

    def __post_init__(self) -> None:
        if (self.min_support is None) == (self.min_count is None):
            raise ValueError("give exactly one of min_support (a fraction) and min_count")
        if self.min_support is not None and not 0 < self.min_support <= 1:
            raise ValueError(f"min support must lie in (0, 1], got {self.min_support}")
        if self.min_count is not None and self.min_count < 1:
            raise ValueError(f"min count must be at least 1, got {self.min_count}")
        if self.max_len is not None and self.max_len < 1:
            raise ValueError(f"max itemset length must be at least 1, got {self.max_len}")

    def threshold(self, n_baskets: int) -> int:
        """Absolute count threshold for a window of ``n_baskets``: ceil(fraction x N), >= 1."""
        if self.min_count is not None:
            return self.min_count
        assert self.min_support is not None
        return max(1, math.ceil(self.min_support * n_baskets))
