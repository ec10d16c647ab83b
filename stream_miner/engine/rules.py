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
import threading
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from fractions import Fraction
from typing import TYPE_CHECKING, cast

from stream_miner.engine.arguments import Exact, bounded_fraction, item_names, optional_whole_number
from stream_miner.engine.limits import DEFAULT_MAX_RULES_TOTAL

if TYPE_CHECKING:
    from stream_miner.engine.rule_set import RuleSet

Names = tuple[str, ...]
RANK_MEASURES = ("confidence", "lift", "leverage", "conviction", "support", "count")


@dataclass(frozen=True)
class Rule:
    """One rule ``antecedent -> consequent`` (sorted item names) with its counts and measures."""

    antecedent: Names
    consequent: Names
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
    """Which rules to keep, checked and normalised at construction.

    ``min_confidence`` (in [0, 1]) and ``min_lift`` (at least 0) convert exactly like
    ``MiningParams.min_support`` and are stored as Fractions; ``antecedent_items`` and
    ``consequent_items`` (any iterable of item names, stored as frozensets) restrict each
    side when given; ``max_rules`` keeps the best rules by ``rank_by`` (ties: higher count,
    then item names). When more than ``max_total`` rules pass the filter (before
    ``max_rules`` picks the best), the mine raises
    :class:`~stream_miner.engine.limits.ResultTooLarge` (None: no cap).
    """

    min_confidence: Exact = Fraction(0)
    min_lift: Exact | None = None
    max_antecedent: int | None = None
    max_consequent: int | None = None
    antecedent_items: Iterable[str] | None = None
    consequent_items: Iterable[str] | None = None
    max_rules: int | None = None
    rank_by: str = "confidence"
    max_total: int | None = DEFAULT_MAX_RULES_TOTAL

    def __post_init__(self) -> None:
        confidence = bounded_fraction(self.min_confidence, "min_confidence", zero=True, up_to_one=True)
        object.__setattr__(self, "min_confidence", confidence)
        if self.min_lift is not None:
            lift = bounded_fraction(self.min_lift, "min_lift", zero=True, up_to_one=False)
            object.__setattr__(self, "min_lift", lift)
        for name in ("max_antecedent", "max_consequent", "max_rules", "max_total"):
            object.__setattr__(self, name, optional_whole_number(getattr(self, name), name))
        for name in ("antecedent_items", "consequent_items"):
            if getattr(self, name) is not None:
                object.__setattr__(self, name, item_names(getattr(self, name), name))
        if not isinstance(self.rank_by, str) or self.rank_by not in RANK_MEASURES:
            raise ValueError(f"unknown measure {self.rank_by!r}; choose from {', '.join(RANK_MEASURES)}")


def generate_rules(
    itemsets: Mapping[Names, int],
    n_baskets: int,
    rule_filter: RuleFilter = RuleFilter(),
    *,
    interrupt: threading.Event | None = None,
) -> RuleSet:
    """Every antecedent/consequent split of every frequent itemset that passes the filter.

    ``itemsets`` (sorted tuples of item names) must be downward closed (every subset of a
    member is a member), as mining output is. Raises ``ResultTooLarge`` past the filter's
    ``max_total`` and ``MiningInterrupted`` once ``interrupt`` is set. Splits are checked with
    numpy (:mod:`stream_miner.engine.rule_splits`); the rules are held as columns whose sides
    index ``list(itemsets)`` (:class:`~stream_miner.engine.rule_set.RuleSet`), in the order of
    the itemsets, then antecedent size, then antecedent positions, or best first with
    ``max_rules``. Cost: O(sum over itemsets of 2^size) array work.
    """
    f = rule_filter
    import numpy as np  # only to make rules

    from stream_miner.engine.rule_set import RuleSet
    from stream_miner.engine.rule_splits import SplitFilter, passing_splits

    splits = SplitFilter(
        min_confidence=cast(Fraction, f.min_confidence),
        min_lift=cast(Fraction | None, f.min_lift),
        max_antecedent=f.max_antecedent,
        max_consequent=f.max_consequent,
        antecedent_items=cast(frozenset | None, f.antecedent_items),
        consequent_items=cast(frozenset | None, f.consequent_items),
        max_total=f.max_total,
    )
    keys = list(itemsets)
    counts = np.fromiter(itemsets.values(), np.int64, len(keys))
    at, antecedent, consequent = passing_splits(keys, counts, n_baskets, splits, interrupt)
    rules = RuleSet(
        keys, antecedent, consequent, counts[at], counts[antecedent], counts[consequent], n_baskets
    )
    if f.max_rules is not None and len(rules) > f.max_rules:
        rules = best_rules(rules, f.max_rules, f.rank_by)
    return rules


def best_rules(rules: RuleSet, limit: int, rank_by: str) -> RuleSet:
    """The ``limit`` best rules by ``rank_by``; ties: higher count, then item names."""
    return rules.take(rules.order(rank_by, "count")[:limit])
