"""Association rules from frequent itemsets, with the standard interestingness measures.

For a rule A -> C over a window of N baskets with counts n(A), n(C), n(AC):
support = n(AC)/N; confidence = n(AC)/n(A); lift = confidence / (n(C)/N)
(Brin, Motwani, Silverstein 1997); leverage = n(AC)/N - n(A)n(C)/N^2 (Piatetsky-Shapiro
1991); conviction = (1 - n(C)/N) / (1 - confidence) (Brin, Motwani, Ullman, Tsur 1997),
infinite when confidence is 1, held as ``math.inf`` (written as JSON ``null``).
Thresholds are compared exactly, in integers, never in floats.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from fractions import Fraction
from itertools import combinations

Itemset = tuple[int, ...]
RANK_MEASURES = ("confidence", "lift", "leverage", "conviction", "support", "count")


@dataclass(frozen=True)
class Rule:
    """One rule ``antecedent -> consequent`` with its counts and measures."""

    antecedent: Itemset
    consequent: Itemset
    count: int
    antecedent_count: int
    consequent_count: int
    n_baskets: int

    @property
    def support(self) -> float:
        return self.count / self.n_baskets

    @property
    def confidence(self) -> float:
        return self.count / self.antecedent_count

    @property
    def lift(self) -> float:
        return self.count * self.n_baskets / (self.antecedent_count * self.consequent_count)

    @property
    def leverage(self) -> float:
        n = self.n_baskets
        return (self.count * n - self.antecedent_count * self.consequent_count) / (n * n)

    @property
    def conviction(self) -> float:
        failures = self.antecedent_count - self.count
        if failures == 0:
            return math.inf
        return (self.n_baskets - self.consequent_count) * self.antecedent_count / (self.n_baskets * failures)

    def measure(self, name: str) -> float:
        """The value of one measure from :data:`RANK_MEASURES`."""
        if name not in RANK_MEASURES:
            raise ValueError(f"unknown measure {name!r}; choose from {', '.join(RANK_MEASURES)}")
        return float(getattr(self, name))


@dataclass(frozen=True)
class RuleFilter:
    """Which rules to keep.

    ``min_confidence`` and ``min_lift`` are exact fractions; ``antecedent_items`` and
    ``consequent_items`` (item names) restrict each side when given; ``max_rules`` keeps the
    best rules by ``rank_by`` (ties: higher count, then smaller item ids).
    """

    min_confidence: Fraction = Fraction(0)
    min_lift: Fraction | None = None
    max_antecedent: int | None = None
    max_consequent: int | None = None
    antecedent_items: frozenset[str] | None = None
    consequent_items: frozenset[str] | None = None
    max_rules: int | None = None
    rank_by: str = "confidence"

    def __post_init__(self) -> None:
        if not 0 <= self.min_confidence <= 1:
            raise ValueError(f"min confidence must lie in [0, 1], got {self.min_confidence}")
        if self.min_lift is not None and self.min_lift < 0:
            raise ValueError(f"min lift must be non-negative, got {self.min_lift}")
        for name in ("max_antecedent", "max_consequent", "max_rules"):
            value = getattr(self, name)
            if value is not None and value < 1:
                raise ValueError(f"{name.replace('_', ' ')} must be at least 1, got {value}")
        if self.rank_by not in RANK_MEASURES:
            raise ValueError(f"unknown measure {self.rank_by!r}; choose from {', '.join(RANK_MEASURES)}")


def generate_rules(
    itemsets: Mapping[Itemset, int],
    n_baskets: int,
    rule_filter: RuleFilter = RuleFilter(),
    names: Sequence[str] = (),
) -> list[Rule]:
    """Every antecedent/consequent split of every frequent itemset that passes the filter.

    ``itemsets`` (item ids) must be downward closed (every subset of a member is a member),
    as mining output is; ``names`` maps ids to names for the side restrictions and for
    breaking ties under ``max_rules``. Cost: O(sum over itemsets of 2^size).
    """
    f = rule_filter
    left = None if f.antecedent_items is None else _ids_named(f.antecedent_items, names)
    right = None if f.consequent_items is None else _ids_named(f.consequent_items, names)
    conf_num, conf_den = f.min_confidence.numerator, f.min_confidence.denominator
    rules = []
    for itemset, count in itemsets.items():
        size = len(itemset)
        if size < 2:
            continue
        largest = size - 1 if f.max_antecedent is None else min(size - 1, f.max_antecedent)
        for k in range(1, largest + 1):
            if f.max_consequent is not None and size - k > f.max_consequent:
                continue
            for antecedent in combinations(itemset, k):
                if left is not None and not left.issuperset(antecedent):
                    continue
                consequent = tuple(i for i in itemset if i not in antecedent)
                if right is not None and not right.issuperset(consequent):
                    continue
                n_a = itemsets[antecedent]
                if count * conf_den < conf_num * n_a:
                    continue
                n_c = itemsets[consequent]
                if f.min_lift is not None and (
                    count * n_baskets * f.min_lift.denominator < f.min_lift.numerator * n_a * n_c
                ):
                    continue
                rules.append(Rule(antecedent, consequent, count, n_a, n_c, n_baskets))
    if f.max_rules is not None and len(rules) > f.max_rules:
        rules = best_rules(rules, f.max_rules, f.rank_by, names)
    return rules


def best_rules(rules: Iterable[Rule], limit: int, rank_by: str, names: Sequence[str]) -> list[Rule]:
    """The ``limit`` best rules by ``rank_by``; ties: higher count, then item names."""

    def key(rule: Rule) -> tuple:
        left = sorted(names[i] for i in rule.antecedent)
        right = sorted(names[i] for i in rule.consequent)
        return (-rule.measure(rank_by), -rule.count, left, right)

    return sorted(rules, key=key)[:limit]


def _ids_named(wanted: frozenset[str], names: Sequence[str]) -> frozenset[int]:
    return frozenset(i for i, name in enumerate(names) if name in wanted)
