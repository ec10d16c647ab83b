"""Rules held as columns: each side an index into a table of item-name tuples, and the three
counts as int64 arrays. A :class:`RuleSet` is a ``Sequence[Rule]`` (length, iteration,
indexing, equality with a list of rules); a :class:`~stream_miner.engine.rules.Rule` is built
only when one is asked for. Measures, orders and selections work on the columns.

Measures are computed in float64 from exact integers, the same operations as ``Rule``'s
properties, so they are the same floats (every product of two counts is at most the window
size squared, exact in float64 below 2^53); larger windows compute them rule by rule.
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from typing import overload

import numpy as np

from stream_miner.engine.rules import RANK_MEASURES, Rule

Names = tuple[str, ...]
_EXACT = 1 << 53  # integers below this are exact in float64


class RuleSet(Sequence[Rule]):
    """Rules ``sides[antecedent[i]] -> sides[consequent[i]]`` with their counts, over a window
    of ``n_baskets``. ``sides`` holds sorted tuples of item names (the itemsets of a result)."""

    __slots__ = (
        "antecedent",
        "antecedent_counts",
        "consequent",
        "consequent_counts",
        "counts",
        "n_baskets",
        "sides",
    )
    __hash__ = None  # type: ignore[assignment]  # mutable-looking like a list: not hashable

    def __init__(
        self,
        sides: Sequence[Names],
        antecedent: np.ndarray,
        consequent: np.ndarray,
        counts: np.ndarray,
        antecedent_counts: np.ndarray,
        consequent_counts: np.ndarray,
        n_baskets: int,
    ) -> None:
        self.sides = sides
        self.antecedent, self.consequent = antecedent, consequent
        self.counts, self.antecedent_counts, self.consequent_counts = (
            counts,
            antecedent_counts,
            consequent_counts,
        )
        self.n_baskets = n_baskets
        for column in self._columns():
            column.flags.writeable = False  # a result's rules do not change

    @classmethod
    def of(cls, rules: Sequence[Rule], n_baskets: int) -> RuleSet:
        """``rules`` as a RuleSet (itself when it is one), all over a window of ``n_baskets``."""
        if isinstance(rules, RuleSet):
            return rules
        position: dict[Names, int] = {}
        sides = [side for r in rules for side in (r.antecedent, r.consequent)]
        index = np.fromiter(
            (position.setdefault(side, len(position)) for side in sides), np.int64, len(sides)
        )
        columns = np.array([(r.count, r.antecedent_count, r.consequent_count) for r in rules], dtype=np.int64)
        counts, n_a, n_c = columns.reshape(len(rules), 3).T
        return cls(list(position), index[0::2], index[1::2], counts, n_a, n_c, n_baskets)

    def __len__(self) -> int:
        return len(self.counts)

    @overload
    def __getitem__(self, i: int) -> Rule: ...
    @overload
    def __getitem__(self, i: slice) -> RuleSet: ...
    def __getitem__(self, i: int | slice) -> Rule | RuleSet:
        if isinstance(i, slice):
            return self.take(np.arange(len(self))[i])
        a, c = int(self.antecedent[i]), int(self.consequent[i])
        counts = int(self.counts[i]), int(self.antecedent_counts[i]), int(self.consequent_counts[i])
        return Rule(self.sides[a], self.sides[c], *counts, self.n_baskets)

    def __iter__(self) -> Iterator[Rule]:
        sides, n = self.sides, self.n_baskets
        for a, c, k, n_a, n_c in zip(*(x.tolist() for x in self._columns()), strict=True):
            yield Rule(sides[a], sides[c], k, n_a, n_c, n)

    def __eq__(self, other: object) -> bool:
        if isinstance(other, RuleSet | list | tuple):
            return len(self) == len(other) and all(a == b for a, b in zip(self, other, strict=True))
        return NotImplemented

    def __repr__(self) -> str:
        return f"RuleSet({list(self)!r})"

    def take(self, chosen: np.ndarray) -> RuleSet:
        """The rules at positions ``chosen`` (an index array), in that order."""
        a, c, counts, n_a, n_c = (x[chosen] for x in self._columns())
        return RuleSet(self.sides, a, c, counts, n_a, n_c, self.n_baskets)

    def _columns(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        return self.antecedent, self.consequent, self.counts, self.antecedent_counts, self.consequent_counts

    def measure(self, name: str) -> np.ndarray:
        """Float64 values of one measure from :data:`RANK_MEASURES` (the floats ``Rule`` gives)."""
        if name not in RANK_MEASURES:
            raise ValueError(f"unknown measure {name!r}; choose from {', '.join(RANK_MEASURES)}")
        n = self.n_baskets
        if n * n >= _EXACT:
            return np.array([rule.measure(name) for rule in self], dtype=np.float64)
        k, a, c = self.counts, self.antecedent_counts, self.consequent_counts
        if name == "count":
            return k.astype(np.float64)
        if name == "support":
            return k / n
        if name == "confidence":
            return k / a
        if name == "lift":
            return (k * n).astype(np.float64) / (a * c).astype(np.float64)
        if name == "leverage":
            return (k * n - a * c).astype(np.float64) / float(n * n)
        failures = a - k
        with np.errstate(divide="ignore", invalid="ignore"):
            out = ((n - c) * a).astype(np.float64) / (n * failures).astype(np.float64)
        out[failures == 0] = np.inf
        return out

    def side_ranks(self) -> np.ndarray:
        """The rank of each side in item-name order (tuples compared element by element)."""
        order = sorted(range(len(self.sides)), key=self.sides.__getitem__)
        ranks = np.empty(len(order), dtype=np.int64)
        ranks[order] = np.arange(len(order))
        return ranks

    def order(self, *measures: str) -> np.ndarray:
        """Positions of the rules sorted by each measure in ``measures`` (highest first), then
        by antecedent, then consequent (item names); a stable sort."""
        ranks = self.side_ranks()
        keys = [ranks[self.consequent], ranks[self.antecedent]] + [
            -self.measure(m) for m in reversed(measures)
        ]
        return np.lexsort(keys)
