"""Exact counts of every pair of watched items, in a dense packed triangle.

Each watched item holds a slot; the count of the pair in slots ``s < t`` sits at cell
``t * (t - 1) // 2 + s`` of one int32 array, so the layout does not depend on the number
of slots (growing appends) and the pairs of the most frequent items, which take the lowest
slots, lie close together. Updating a batch is one scatter-add over the pairs inside its
baskets (see :func:`~stream_miner.engine.incremental.kernels.run`).
"""

from __future__ import annotations

import numpy as np

from stream_miner.engine.baskets import BasketArrays
from stream_miner.engine.incremental.bitmaps import BasketSource
from stream_miner.engine.incremental.kernels import add_pairs, run

FIRST_CAPACITY = 64
ROWS_PER_PASS = 256  # slots scanned at once by pairs_among (bounds its temporary arrays)
# pairs per pass, at most: bounds the report buffer (2 MiB) and how long one pass of the numpy
# loop runs before kernels.run can hand over to the compiled one (a start on a large window)
PAIRS_PER_PASS = 1 << 18


class PairTable:
    """Pair counts for a set of watched items, kept exact as baskets enter and leave.

    >>> table = PairTable()
    >>> window = BasketArrays.from_lists([[1, 2, 3], [2, 3], [3]])
    >>> table.watch(np.array([False, False, True, True]), lambda flags: window, np.array([1, 1, 2, 3]))
    >>> table.count(np.array([2]), np.array([3])).tolist()
    [2]
    """

    def __init__(self) -> None:
        self.slot_of = np.full(0, -1, dtype=np.int64)  # item id -> slot, -1 when not watched
        self.item_at = np.full(0, -1, dtype=np.int64)  # slot -> item id, -1 when free
        self.counts = np.zeros(0, dtype=np.int32)  # the packed triangle

    @property
    def watched(self) -> np.ndarray:
        """Boolean mask over item ids."""
        return self.slot_of >= 0

    def watched_among(self, n: int) -> np.ndarray:
        """Boolean mask over item ids ``0 .. n - 1``."""
        mask = np.zeros(n, dtype=bool)
        mask[: min(n, self.slot_of.size)] = self.watched[:n]
        return mask

    def watch(self, wanted: np.ndarray, window: BasketSource, item_counts: np.ndarray) -> None:
        """Watch exactly the items set in the boolean ``wanted``: forget the pairs of items
        no longer wanted, and count the pairs of newly wanted items over the window. Items
        with larger ``item_counts`` take lower slots, so the busiest cells lie close together."""
        watched = self.watched_among(wanted.size)
        gone = np.flatnonzero(watched & ~wanted)
        if self.slot_of.size > wanted.size:
            gone = np.concatenate([gone, np.flatnonzero(self.watched[wanted.size :]) + wanted.size])
        if gone.size:
            slots = self.slot_of[gone][:, None]
            every = np.arange(self.capacity)
            self.counts[cell_of(slots, every)[slots != every]] = 0
            self.item_at[slots] = -1
            self.slot_of[gone] = -1
        fresh = wanted & ~watched
        if fresh.any():
            fresh_items = np.flatnonzero(fresh)
            self._assign(fresh_items[np.argsort(-item_counts[fresh_items], kind="stable")])
            baskets = window(fresh)
            self._count(baskets, np.ones(len(baskets), dtype=np.int32), fresh, None)

    def _count(
        self, baskets: BasketArrays, signs: np.ndarray, only: np.ndarray | None, report_from: int | None
    ) -> np.ndarray:
        """Add each basket's sign to its pairs of watched items that hold an item set in
        ``only``; the touched pairs counted at least ``report_from``, as rows of item ids.
        Passes over at most ``PAIRS_PER_PASS`` pairs each bound the report buffer and the
        time spent in the numpy loop before the compiled one takes over."""
        lengths = baskets.lengths()
        pairs = np.cumsum(lengths * (lengths - 1) // 2)  # pairs up to and including each basket
        cuts: np.ndarray | list[int] = (
            np.searchsorted(pairs, np.arange(PAIRS_PER_PASS, pairs[-1], PAIRS_PER_PASS)) if pairs.size else []
        )
        bounds = np.unique(np.concatenate([[0], cuts, [len(baskets)]])).astype(np.int64)
        flat, reported = self.counts, [np.empty(0, dtype=np.int64)]
        for first, stop in zip(bounds[:-1].tolist(), bounds[1:].tolist(), strict=False):
            part = baskets.part(first, stop)
            room = 0 if report_from is None else int(pairs[stop - 1] - (pairs[first - 1] if first else 0))
            cells = np.empty(room, dtype=np.int64)
            n = run(
                add_pairs,
                part.items,
                part.start,
                signs[first:stop],
                self.slot_of,
                only,
                flat,
                np.iinfo(np.int32).max if report_from is None else report_from,
                cells,
            )
            reported.append(cells[:n])
        cells = np.unique(np.concatenate(reported))
        return self._items_of(cells[flat[cells] >= (report_from or 1)])

    def add(self, baskets: BasketArrays, signs: np.ndarray, report_from: int) -> np.ndarray:
        """Count baskets that entered (sign 1) or left (sign -1). Returns the pairs they
        touched whose count is now at least ``report_from``, as rows of sorted item ids."""
        return self._count(baskets, signs.astype(np.int32), None, report_from)

    def count(self, first: np.ndarray, second: np.ndarray) -> np.ndarray:
        """Count of each pair (both items watched)."""
        return self.counts[self._cells(first, second)].astype(np.int64)

    def pairs_among(self, items: np.ndarray, at_least: int) -> np.ndarray:
        """Every pair of the items set in the boolean ``items`` (all watched) whose count is
        at least ``at_least`` (1 or more), as rows of sorted item ids. O(items squared)."""
        _check_positive(at_least)
        slots = np.sort(self.slot_of[np.flatnonzero(items)])
        found = [np.empty(0, dtype=np.int64)]
        for first in range(0, slots.size, ROWS_PER_PASS):  # slots[i] < slots[j] for i < j
            rows = np.arange(first, min(first + ROWS_PER_PASS, slots.size))
            above = rows[:, None] < np.arange(slots.size)
            cells = np.where(above, cell_of(slots[rows][:, None], slots), 0)  # a slot with itself has no cell
            hit = above & (self.counts[cells] >= at_least)
            found.append(cells[hit])
        return self._items_of(np.concatenate(found))

    def pairs_with(self, entering: np.ndarray, items: np.ndarray, at_least: int) -> np.ndarray:
        """Every pair of an item in ``entering`` (ids) with an item set in ``items`` whose count
        is at least ``at_least`` (1 or more), as distinct rows of sorted item ids.
        O(entering x items)."""
        _check_positive(at_least)
        others = self.slot_of[np.flatnonzero(items)]
        mine = self.slot_of[entering]
        apart = mine[:, None] != others
        cells = np.where(apart, cell_of(mine[:, None], others), 0)  # a slot with itself has no cell
        hit = apart & (self.counts[cells] >= at_least)
        return self._items_of(np.unique(cells[hit]))

    @property
    def capacity(self) -> int:
        return self.item_at.size

    def _cells(self, first: np.ndarray, second: np.ndarray) -> np.ndarray:
        return cell_of(self.slot_of[first], self.slot_of[second])

    def _items_of(self, cells: np.ndarray) -> np.ndarray:
        high = ((1 + np.sqrt(1 + 8 * cells.astype(np.float64))) // 2).astype(np.int64)
        high -= cell_of(0, high) > cells  # float rounding, either way
        high += cell_of(0, high + 1) <= cells
        a, b = self.item_at[cells - cell_of(0, high)], self.item_at[high]
        pairs = np.column_stack([np.minimum(a, b), np.maximum(a, b)])
        return pairs[np.lexsort((pairs[:, 1], pairs[:, 0]))]

    def _assign(self, items: np.ndarray) -> None:
        free = np.flatnonzero(self.item_at < 0)
        if free.size < items.size:
            self._grow(self.capacity - free.size + items.size)
            free = np.flatnonzero(self.item_at < 0)
        slots = free[: items.size]
        if self.slot_of.size <= items.max():
            self.slot_of = np.concatenate(
                [self.slot_of, np.full(int(items.max()) + 1 - self.slot_of.size, -1)]
            )
        self.slot_of[items] = slots
        self.item_at[slots] = items

    def _grow(self, needed: int) -> None:
        capacity = max(FIRST_CAPACITY, self.capacity)
        while capacity < needed:
            capacity *= 2
        self.counts = np.concatenate(
            [self.counts, np.zeros(cell_of(0, capacity) - self.counts.size, dtype=np.int32)]
        )
        self.item_at = np.concatenate([self.item_at, np.full(capacity - self.item_at.size, -1)])


def _check_positive(at_least: int) -> None:
    if at_least < 1:  # a zero bound would pair items with themselves and with unseen items
        raise ValueError(f"a pair count bound must be at least 1, got {at_least}")


def cell_of(s: np.ndarray | int, t: np.ndarray | int) -> np.ndarray:
    """Cell of the pair of slots ``s`` and ``t`` (either order, broadcast) in the packed
    triangle; ``cell_of(0, t)`` is where the pairs of ``t`` with lower slots start.

    >>> cell_of(np.array([0, 2, 1, 3]), np.array([1, 0, 2, 2])).tolist()
    [0, 1, 2, 5]
    """
    low, high = np.minimum(s, t), np.maximum(s, t).astype(np.int64)
    return high * (high - 1) // 2 + low
