"""What to mine: support threshold, itemset size, item lists, rule filters and the result cap."""

from __future__ import annotations

import math
from collections.abc import Iterable
from dataclasses import dataclass
from fractions import Fraction
from typing import cast

from stream_miner.engine.arguments import (
    Exact,
    bounded_fraction,
    item_names,
    optional_whole_number,
    whole_number,
)
from stream_miner.engine.limits import DEFAULT_MAX_ITEMSETS
from stream_miner.engine.rules import RuleFilter


@dataclass(frozen=True)
class MiningParams:
    """What to mine, checked and normalised at construction.

    - ``min_support`` (a fraction of the window in (0, 1]: Fraction, int, Decimal, str such
      as ``"0.07"`` or ``"7/100"``, or float, converted exactly: 0.07 is 7/100) or
      ``min_count`` (a basket count, at least 1): exactly one of them;
    - ``max_size``: the largest itemset size reported (None: any);
    - ``include`` / ``exclude``: item names (any iterable of str) that alone may appear /
      never appear;
    - ``rules``: a :class:`RuleFilter` to also derive rules;
    - ``max_itemsets``: a mine that would report more itemsets raises
      :class:`~stream_miner.engine.limits.ResultTooLarge` before listing them (None: no cap).

    Stored values are normalised: ``min_support`` is a Fraction, item lists are frozensets.

    >>> MiningParams(min_support=0.07).threshold(100)
    7
    """

    min_support: Exact | None = None
    min_count: int | None = None
    max_size: int | None = None
    include: Iterable[str] | None = None
    exclude: Iterable[str] = frozenset()
    rules: RuleFilter | None = None
    max_itemsets: int | None = DEFAULT_MAX_ITEMSETS

    def __post_init__(self) -> None:
        if (self.min_support is None) == (self.min_count is None):
            raise ValueError("give exactly one of min_support (a fraction) and min_count")
        if self.min_support is not None:
            support = bounded_fraction(self.min_support, "min_support", zero=False, up_to_one=True)
            object.__setattr__(self, "min_support", support)
        if self.min_count is not None:
            object.__setattr__(self, "min_count", whole_number(self.min_count, "min_count"))
        object.__setattr__(self, "max_size", optional_whole_number(self.max_size, "max_size"))
        if self.include is not None:
            object.__setattr__(self, "include", item_names(self.include, "include"))
        object.__setattr__(self, "exclude", item_names(self.exclude, "exclude"))
        if self.rules is not None and not isinstance(self.rules, RuleFilter):
            raise ValueError(f"rules must be a RuleFilter or None, got {type(self.rules).__name__}")
        object.__setattr__(self, "max_itemsets", optional_whole_number(self.max_itemsets, "max_itemsets"))

    def threshold(self, n_baskets: int) -> int:
        """Absolute count threshold for a window of ``n_baskets``: ceil(fraction x N), >= 1."""
        if self.min_count is not None:
            return self.min_count
        return max(1, math.ceil(cast(Fraction, self.min_support) * n_baskets))

    def allows(self, name: str) -> bool:
        """Whether item ``name`` may appear in a result (the include and exclude lists)."""
        return (self.include is None or name in self.include) and name not in self.exclude
