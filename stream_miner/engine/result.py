"""The result of mining one window."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from stream_miner.engine.rules import Rule


@dataclass(frozen=True)
class MiningResult:
    """Frequent itemsets (sorted tuples of item names) with counts, and rules (whose sides are
    sorted tuples of item names too), for a window of ``n_baskets`` at threshold ``min_count``.
    Mined rules are a :class:`~stream_miner.engine.rule_set.RuleSet` (columns, a Sequence)."""

    n_baskets: int
    min_count: int
    itemsets: dict[tuple[str, ...], int]
    rules: Sequence[Rule]
