"""Where a pattern's figures are compared from: the baseline window's itemset counts.

At every tick the detector records the counts of the result's itemsets (sizes 1 to the
largest pattern size) with the window's span. The baseline for a tick is, by policy:

- ``previous`` (default): the newest recorded window that shares no basket with the current
  one (its end at or before the current start), so the two samples are disjoint; until one
  exists, the first full window;
- ``reference``: the first full window, for the whole run (a fixed reference period);
- ``decayed``: an exponentially decayed sum of the disjoint windows seen so far, each
  window's weight halving every ``half_life`` windows (a long memory that forgets slowly).

An itemset missing from a recorded result was below that tick's support threshold: its
count is at most the threshold minus one, and that bound is used (``exact`` False). For a
test of a rise the bound is the conservative choice (a larger baseline makes a smaller rise).
"""

from __future__ import annotations

from dataclasses import dataclass, field

Names = tuple[str, ...]
POLICIES = ("previous", "reference", "decayed")


@dataclass
class Recorded:
    """One window's counts: its span (start, end) in basket numbers or event time, its size,
    its support threshold, and the counts of its itemsets."""

    tick: int
    start: float
    end: float
    n_baskets: int
    min_count: int
    counts: dict[Names, int]

    def count(self, items: Names) -> tuple[int, bool]:
        """The count of ``items`` and whether it is exact (else an upper bound)."""
        found = self.counts.get(items)
        return (found, True) if found is not None else (max(0, self.min_count - 1), False)

    def state(self) -> list:
        counts = [[list(items), count] for items, count in self.counts.items()]
        return [self.tick, self.start, self.end, self.n_baskets, self.min_count, counts]

    @classmethod
    def from_state(cls, entry: list) -> Recorded:
        tick, start, end, n_baskets, min_count, counts = entry
        return cls(
            int(tick), float(start), float(end), int(n_baskets), int(min_count),
            {tuple(items): int(count) for items, count in counts},
        )  # fmt: skip


@dataclass
class Decayed:
    """Disjoint windows folded into decayed sums: per itemset, the decayed count of the folds
    that recorded it (``counts``) and the decayed bounds of those that did not (``missing``);
    ``bound`` is the decayed sum of every fold's bound, what an itemset never recorded gets."""

    weight: float  # each fold multiplies what is there by this (0.5 ** (1 / half_life))
    n_baskets: float = 0.0
    bound: float = 0.0
    counts: dict[Names, float] = field(default_factory=dict)
    missing: dict[Names, float] = field(default_factory=dict)
    end: float = float("-inf")

    def fold(self, window: Recorded) -> None:
        w = self.weight
        gap = window.min_count - 1
        self.n_baskets = w * self.n_baskets + window.n_baskets
        for items in self.counts.keys() - window.counts.keys():
            self.counts[items] *= w
            self.missing[items] = w * self.missing.get(items, 0.0) + gap
        for items, count in window.counts.items():
            old = self.counts.get(items)
            if old is None:  # earlier folds held it below their thresholds: their bounds
                self.counts[items] = count
                self.missing[items] = w * self.bound
            else:
                self.counts[items] = w * old + count
                self.missing[items] = w * self.missing.get(items, 0.0)
        self.bound = w * self.bound + gap
        self.end = window.end
        # an itemset whose upper bound is no higher than an absent one's is kept as absent
        for items in [i for i, c in self.counts.items() if c + self.missing.get(i, 0.0) <= self.bound]:
            del self.counts[items]
            self.missing.pop(items, None)

    def count(self, items: Names) -> tuple[float, bool]:
        """The decayed count of ``items`` and whether it is exact (else an upper bound)."""
        found = self.counts.get(items)
        if found is None:
            return self.bound, False
        missing = self.missing.get(items, 0.0)
        return found + missing, missing == 0.0

    def state(self) -> dict:
        return {
            "weight": self.weight,
            "n_baskets": self.n_baskets,
            "bound": self.bound,
            "end": None if self.end == float("-inf") else self.end,
            "counts": [[list(i), c, self.missing.get(i, 0.0)] for i, c in self.counts.items()],
        }

    @classmethod
    def from_state(cls, state: dict) -> Decayed:
        decayed = cls(float(state["weight"]), float(state["n_baskets"]), float(state["bound"]))
        decayed.end = float("-inf") if state["end"] is None else float(state["end"])
        for items, count, missing in state["counts"]:
            decayed.counts[tuple(items)] = float(count)
            if missing:
                decayed.missing[tuple(items)] = float(missing)
        return decayed
