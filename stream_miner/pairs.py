"""Item pairs packed into int64 keys, and exact counts by key held in sorted numpy arrays.

A pair ``(a, b)`` with ``a < b`` is packed into one int64 key ``(a << 32) | b``. Only keys
with a non-zero count are stored; an absent key has count 0.
"""

from __future__ import annotations

import numpy as np

from stream_miner.baskets import BasketArrays, offsets

_SHIFT = np.int64(32)
_LOW = np.int64(0xFFFFFFFF)


def pack(first: np.ndarray, second: np.ndarray) -> np.ndarray:
    """Keys of the pairs (first[i], second[i]), order-independent."""
    low, high = np.minimum(first, second), np.maximum(first, second)
    return (low.astype(np.int64) << _SHIFT) | high.astype(np.int64)


def unpack(keys: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The two item ids of each key (smaller first)."""
    return keys >> _SHIFT, keys & _LOW


def pairs_in(baskets: BasketArrays, watched: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Keys of every pair of watched items inside each basket, and the basket of each pair.

    ``watched`` is a boolean mask over item ids (ids past its end are not watched).
    O(pairs produced), vectorised.
    """
    keep = baskets.items < watched.size
    keep[keep] = watched[baskets.items[keep]]
    items = baskets.items[keep]
    rows = baskets.row_of_items()[keep]
    start = offsets(np.bincount(rows, minlength=len(baskets)))
    later = start[rows + 1] - np.arange(items.size) - 1  # items after each entry in its basket
    total = int(later.sum())
    if total == 0:
        return np.empty(0, dtype=np.int64), np.empty(0, dtype=np.int64)
    first = np.repeat(np.arange(items.size), later)
    run_start = np.repeat(np.cumsum(later) - later, later)
    second = first + 1 + (np.arange(total) - run_start)
    return pack(items[first], items[second]), rows[first]


def search(sorted_keys: np.ndarray, keys: np.ndarray) -> np.ndarray:
    """``np.searchsorted(sorted_keys, keys)``, faster for many queries into a table larger
    than the cache: the queries are sorted first so the search walks memory in order."""
    if keys.size < 4096 or sorted_keys.size < 1 << 15:
        return np.searchsorted(sorted_keys, keys)
    order = np.argsort(keys)
    position = np.empty(keys.size, dtype=np.int64)
    position[order] = np.searchsorted(sorted_keys, keys[order])
    return position


def locate(sorted_keys: np.ndarray, keys: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Position of each key in ``sorted_keys`` and whether it is there."""
    if sorted_keys.size == 0:
        return np.zeros(keys.size, dtype=np.int64), np.zeros(keys.size, dtype=bool)
    position = np.minimum(search(sorted_keys, keys), sorted_keys.size - 1)
    return position, sorted_keys[position] == keys


class KeyCounts:
    """Counts by int64 key (item pairs, or longer itemsets keyed by prefix id), in batches.

    >>> pairs = KeyCounts()
    >>> pairs.add(pack(np.array([1, 2]), np.array([2, 1])), np.array([3, 1]))
    >>> pairs.count(pack(np.array([2]), np.array([1]))).tolist()
    [4]
    """

    __slots__ = ("keys", "counts")

    def __init__(self) -> None:
        self.keys = np.empty(0, dtype=np.int64)
        self.counts = np.empty(0, dtype=np.int64)

    def __len__(self) -> int:
        return self.keys.size

    def add(self, keys: np.ndarray, deltas: np.ndarray) -> None:
        """Add ``deltas`` to the counts of ``keys`` (keys may repeat). O(batch log stored),
        plus O(stored) when new keys arrive or counts reach zero."""
        position = search(self.keys, keys)
        present = position < self.keys.size
        present[present] = self.keys[position[present]] == keys[present]
        np.add.at(self.counts, position[present], deltas[present])
        if not present.all():
            fresh, fresh_deltas = _merge_duplicates(keys[~present], deltas[~present])
            nonzero = fresh_deltas != 0
            fresh, fresh_deltas = fresh[nonzero], fresh_deltas[nonzero]
            if (fresh_deltas < 0).any():
                raise RuntimeError("counts would go negative: the tracker lost a basket")
            at = np.searchsorted(self.keys, fresh)
            self.keys = np.insert(self.keys, at, fresh)
            self.counts = np.insert(self.counts, at, fresh_deltas)
        if (self.counts <= 0).any():
            self._drop(self.counts > 0)

    def count(self, keys: np.ndarray) -> np.ndarray:
        """Current count of each key (0 when absent)."""
        position, hit = locate(self.keys, keys)
        return np.where(hit, self.counts[position], 0) if self.keys.size else np.zeros(keys.size, np.int64)

    def drop_items(self, gone: np.ndarray) -> None:
        """Forget every pair that holds an item whose entry in the boolean ``gone`` is set."""
        if self.keys.size and gone.any():
            first, second = unpack(self.keys)
            self._drop(~(gone[first] | gone[second]))

    def _drop(self, keep: np.ndarray) -> None:
        self.keys = self.keys[keep]
        self.counts = self.counts[keep]


def _merge_duplicates(keys: np.ndarray, deltas: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    order = np.argsort(keys, kind="stable")
    keys, deltas = keys[order], deltas[order]
    starts = np.flatnonzero(np.append(True, keys[1:] != keys[:-1])) if keys.size else keys
    return keys[starts], np.add.reduceat(deltas, starts) if keys.size else deltas
