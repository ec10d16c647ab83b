"""A capped, stable set of patterns for the per-pattern series: the top K by support, with
hysteresis on membership.

Only patterns in state active or falling are eligible. Free places go to the strongest
eligible patterns. Once the set is full, a newcomer displaces the weakest member only when its
support exceeds that member's by more than ``margin`` of it (relative; default 10%): two
patterns trading places around the K-th support leave the set as it is. A member that is no
longer eligible (it faded, or went back to rising) leaves at once, and its series with it.
So the set never holds more than K patterns, whatever the data.

>>> from stream_miner.drift.events import PatternStatus
>>> top = TopPatterns(k=1)
>>> top.update([PatternStatus(("jam", "tea"), "active", 50, 1000, 0.6, 2.0)])
>>> top.update([PatternStatus(("jam", "tea"), "active", 50, 1000, 0.6, 2.0),
...             PatternStatus(("milk", "oats"), "active", 54, 1000, 0.7, 1.8)])  # +8%: stays out
>>> [p.items for p in top.members]
[('jam', 'tea')]
"""

from __future__ import annotations

from collections.abc import Iterable
from fractions import Fraction

from stream_miner.drift.events import ACTIVE, FALLING, Names, PatternStatus

DEFAULT_TOP_K = 20
MAX_TOP_K = 100  # hard maximum of patterns with their own series
DEFAULT_MARGIN = Fraction(1, 10)  # a newcomer must beat the weakest member's support by 10% of it
ELIGIBLE = frozenset({ACTIVE, FALLING})


class TopPatterns:
    """The patterns that get series of their own: at most ``k`` (1 to ``MAX_TOP_K``)."""

    def __init__(self, k: int = DEFAULT_TOP_K, margin: Fraction = DEFAULT_MARGIN) -> None:
        if not 1 <= k <= MAX_TOP_K:
            raise ValueError(f"the top-K of patterns must lie between 1 and {MAX_TOP_K}, got {k}")
        if margin < 0:
            raise ValueError(f"the displacement margin must not be negative, got {margin}")
        self.k = k
        self.margin = margin
        self._members: dict[Names, PatternStatus] = {}

    @property
    def members(self) -> tuple[PatternStatus, ...]:
        """The members with their latest figures, strongest first."""
        return tuple(sorted(self._members.values(), key=_rank))

    def update(self, patterns: Iterable[PatternStatus]) -> None:
        """Take one tick's tracked patterns. O(n log n + n K) for n eligible patterns."""
        eligible = {p.items: p for p in patterns if p.state in ELIGIBLE}
        self._members = {items: eligible[items] for items in self._members if items in eligible}
        newcomers = sorted((p for items, p in eligible.items() if items not in self._members), key=_rank)
        for pattern in newcomers:
            if len(self._members) < self.k:
                self._members[pattern.items] = pattern
                continue
            weakest = max(self._members.values(), key=_rank)
            if _support(pattern) <= _support(weakest) * (1 + self.margin):
                break  # newcomers come strongest first: no later one beats the margin either
            del self._members[weakest.items]
            self._members[pattern.items] = pattern


def _support(pattern: PatternStatus) -> Fraction:
    return Fraction(pattern.count, pattern.n_baskets) if pattern.n_baskets else Fraction(0)


def _rank(pattern: PatternStatus) -> tuple[Fraction, Names]:
    """Sorts strongest first; ties by items, so the order never depends on input order."""
    return -_support(pattern), pattern.items
