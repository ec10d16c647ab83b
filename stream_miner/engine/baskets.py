"""Baskets held as arrays (CSR form): basket ``r`` is ``items[start[r]:start[r + 1]]``."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from itertools import chain

import numpy as np


def offsets(lengths: np.ndarray) -> np.ndarray:
    """Row starts of a CSR layout from row lengths: ``[0, l0, l0 + l1, ...]``."""
    start = np.zeros(len(lengths) + 1, dtype=np.int64)
    np.cumsum(lengths, out=start[1:])
    return start


@dataclass(frozen=True)
class BasketArrays:
    """A batch of baskets of item ids, back to back, with row offsets.

    >>> batch = BasketArrays.from_lists([[3, 1], [2]])
    >>> batch.items.tolist(), batch.start.tolist(), len(batch)
    ([3, 1, 2], [0, 2, 3], 2)
    """

    items: np.ndarray  # int64
    start: np.ndarray  # int64, len = baskets + 1

    def __len__(self) -> int:
        return self.start.size - 1

    @classmethod
    def empty(cls) -> BasketArrays:
        return cls(np.empty(0, dtype=np.int64), np.zeros(1, dtype=np.int64))

    @classmethod
    def from_lists(cls, baskets: Sequence[Sequence[int]]) -> BasketArrays:
        """Pack lists of item ids. O(total items)."""
        start = offsets(np.fromiter(map(len, baskets), dtype=np.int64, count=len(baskets)))
        items = np.fromiter(chain.from_iterable(baskets), dtype=np.int64, count=int(start[-1]))
        return cls(items, start)

    @classmethod
    def from_lengths(cls, items: np.ndarray, lengths: np.ndarray) -> BasketArrays:
        """Pack items given the length of every basket."""
        return cls(items.astype(np.int64, copy=False), offsets(lengths))

    @classmethod
    def concat(cls, parts: Sequence[BasketArrays]) -> BasketArrays:
        """All baskets of ``parts``, in order."""
        if not parts:
            return cls.empty()
        lengths = np.concatenate([np.diff(p.start) for p in parts])
        return cls.from_lengths(np.concatenate([p.items for p in parts]), lengths)

    def lengths(self) -> np.ndarray:
        """Items per basket."""
        return np.diff(self.start)

    def row_of_items(self) -> np.ndarray:
        """The basket index of every entry of ``items``."""
        return np.repeat(np.arange(len(self), dtype=np.int64), self.lengths())

    def select(self, rows: np.ndarray) -> BasketArrays:
        """The baskets at ``rows`` (boolean mask or indices), in that order. O(selected items)."""
        rows = np.flatnonzero(rows) if rows.dtype == bool else rows
        lengths = self.lengths()[rows]
        gather = np.repeat(self.start[rows] - np.cumsum(lengths) + lengths, lengths)
        return BasketArrays.from_lengths(self.items[gather + np.arange(gather.size)], lengths)

    def to_lists(self) -> list[list[int]]:
        """The baskets as lists (for tests and small batches)."""
        flat = self.items.tolist()
        bounds = self.start.tolist()
        return [flat[bounds[r] : bounds[r + 1]] for r in range(len(self))]

    def part(self, first: int, stop: int) -> BasketArrays:
        """Baskets ``first`` to ``stop - 1`` (clipped to the batch), without copying items."""
        stop = min(stop, len(self))
        start = self.start[first : stop + 1]
        return BasketArrays(self.items[start[0] : start[-1]], start - start[0])
