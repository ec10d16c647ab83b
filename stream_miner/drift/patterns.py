"""Which itemsets are co-purchase patterns, and their figures.

A pattern is an itemset of two or more items that is **productive**: for every way of
splitting it into two non-empty parts P and Q, the parts occur together more often than
chance, with lift(P -> Q) = n(PQ) N / (n(P) n(Q)) at least the lift threshold (and above 1).
This is the lift-based form of Webb's productivity ("Self-sufficient itemsets", ACM TKDD 2010)
and plays the part of minimum improvement (Bayardo, Agrawal & Gunopulos 1999): a bundle
{a, b} seen with an unrelated popular item c makes {a, b, c} frequent, but the split
{a, b} | {c} has lift near 1, so {a, b, c} is no pattern of its own and raises no event.
The pattern's lift is its weakest split's lift. Its rules are the splits A -> C whose
confidence passes the threshold and that beat every rule A' -> C with a smaller antecedent
(improvement above 0).
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from dataclasses import dataclass
from fractions import Fraction
from functools import cache
from itertools import combinations

from stream_miner.engine.rules import Rule

Names = tuple[str, ...]
CountOf = Callable[[Names], int]


@dataclass(frozen=True)
class Thresholds:
    """A pattern's bar: at least ``min_count`` baskets, confidence of its best rule at least
    ``min_confidence``, every split's lift at least ``min_lift`` (and above 1)."""

    min_count: int
    min_confidence: Fraction
    min_lift: Fraction

    def lowered(self, fraction: Fraction) -> Thresholds:
        """The exit bar of the hysteresis band: count and confidence times ``fraction``,
        lift 1 + ``fraction`` x (lift - 1) (lift's neutral point is 1, not 0)."""
        return Thresholds(
            min_count=max(1, -(-self.min_count * fraction.numerator // fraction.denominator)),
            min_confidence=self.min_confidence * fraction,
            min_lift=1 + fraction * (self.min_lift - 1) if self.min_lift > 1 else self.min_lift,
        )


@dataclass(frozen=True)
class Figures:
    """An itemset's counts now: baskets holding it, the window size, its weakest split (the
    two parts and their counts) with that split's lift, its best rule's confidence (exact
    fractions), whether any of its rules improves on a smaller rule, and the rules worth
    reporting (improving, and confident enough)."""

    count: int
    n_baskets: int
    lift: Fraction
    confidence: Fraction
    weakest: tuple[Names, Names, int, int]
    improves: bool
    rules: tuple[Rule, ...]

    def passes(self, bar: Thresholds) -> bool:
        return (
            self.count >= bar.min_count
            and self.lift > 1
            and self.lift >= bar.min_lift
            and self.confidence >= bar.min_confidence
            and self.improves
        )


def splits(items: Names) -> Iterator[tuple[Names, Names]]:
    """Every split of ``items`` into two non-empty parts, each once: first the splits that set
    one item apart, then the others."""
    for left, right in _split_positions(len(items)):
        yield tuple(items[i] for i in left), tuple(items[i] for i in right)


@cache
def _split_positions(size: int) -> tuple[tuple[tuple[int, ...], tuple[int, ...]], ...]:
    """The splits of ``size`` positions (see :func:`splits`), the one-item ones first."""
    everything = range(size)
    found = []
    for k in range(1, size // 2 + 1):
        for chosen in combinations(everything, k):
            rest = tuple(i for i in everything if i not in chosen)
            if 2 * k < size or chosen < rest:  # a half-half split once, not twice
                found.append((chosen, rest))
    return tuple(found)


def figures(
    items: Names,
    n_baskets: int,
    count_of: CountOf,
    min_confidence: Fraction,
    lift_floor: Fraction | None = None,
) -> Figures:
    """The figures of ``items`` (sorted, two or more) in a window of ``n_baskets``, with
    ``count_of`` giving the exact count of it and of each of its subsets; the rules listed
    are those with confidence at least ``min_confidence``.

    With ``lift_floor``, an itemset with a split whose lift is below it or at most 1 (no
    pattern at that bar) is given up at that split: its figures then hold that split's lift and no
    rules. The weakest split is the one whose parts are most common (same count, same
    window: the largest n(P) n(Q) gives the lowest lift), the best rule the one with the
    rarest antecedent, so only integers are compared before the figures are built."""
    count = count_of(items)
    parts = []
    for left, right in splits(items):
        n_left, n_right = count_of(left), count_of(right)
        expected = n_left * n_right  # lift = count x n_baskets / expected
        if lift_floor is not None and (
            count * n_baskets * lift_floor.denominator < lift_floor.numerator * expected
            or count * n_baskets <= expected
        ):
            lift = Fraction(count * n_baskets, n_left * n_right) if n_left and n_right else Fraction(0)
            return Figures(count, n_baskets, lift, Fraction(0), (left, right, n_left, n_right), False, ())
        parts.append((left, right, n_left, n_right))
    left, right, n_left, n_right = max(parts, key=lambda p: p[2] * p[3])
    lift = Fraction(count * n_baskets, n_left * n_right) if n_left and n_right else Fraction(0)
    rarest = min(min(p[2], p[3]) for p in parts)
    confidence = Fraction(count, rarest) if rarest else Fraction(0)
    improving = [
        rule
        for a, c, n_a, n_c in parts
        for rule in (Rule(a, c, count, n_a, n_c, n_baskets), Rule(c, a, count, n_c, n_a, n_baskets))
        if rule.antecedent_count and _improves(rule, count_of)
    ]
    bar = min_confidence
    rules = tuple(r for r in improving if r.count * bar.denominator >= bar.numerator * r.antecedent_count)
    return Figures(count, n_baskets, lift, confidence, (left, right, n_left, n_right), bool(improving), rules)


def _improves(rule: Rule, count_of: CountOf) -> bool:
    """Whether ``rule`` is more confident than every rule with the same consequent and an
    antecedent that is a proper non-empty subset of its own."""
    for k in range(1, len(rule.antecedent)):
        for smaller in combinations(rule.antecedent, k):
            together = tuple(sorted(smaller + rule.consequent))
            if rule.count * count_of(smaller) <= count_of(together) * rule.antecedent_count:
                return False
    return True


def lift_without(part: Names, whole: Names, n_baskets: int, count_of: CountOf) -> Fraction:
    """The weakest split lift of ``part`` counted only in the baskets that do not hold all
    of ``whole``'s other items: whether ``part`` is productive on its own, apart from
    ``whole`` (Webb's independent productivity)."""
    rest = tuple(i for i in whole if i not in part)
    with_rest = lambda items: count_of(tuple(sorted((*items, *rest))))  # noqa: E731
    n = n_baskets - count_of(rest)
    both = count_of(part) - with_rest(part)
    weakest: Fraction | None = None
    for left, right in splits(part):
        n_left, n_right = count_of(left) - with_rest(left), count_of(right) - with_rest(right)
        lift = (
            Fraction(both * n, n_left * n_right) if n_left > 0 and n_right > 0 and both > 0 else Fraction(0)
        )
        weakest = lift if weakest is None else min(weakest, lift)
    return weakest if weakest is not None else Fraction(0)
