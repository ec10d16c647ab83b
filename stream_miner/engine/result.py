"""The result of mining one window."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

from stream_miner.engine.rules import Rule


@dataclass(frozen=True)
class MiningResult:
    """Frequent itemsets (item names, sorted) with counts, and rules, for one window."""

    n_baskets: int
    min_count: int
    itemsets: dict[tuple[str, ...], int]
    rules: list[Rule]
    names: Sequence[str] = field(repr=False)

    def rule_names(self, rule: Rule) -> tuple[tuple[str, ...], tuple[str, ...]]:
        """Antecedent and consequent of ``rule`` as sorted item names."""
        return (
            tuple(sorted(self.names[i] for i in rule.antecedent)),
            tuple(sorted(self.names[i] for i in rule.consequent)),
        )
