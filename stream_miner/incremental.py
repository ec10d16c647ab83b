"""Incremental mining: exact counts of the frequent itemsets and their negative border.

The tracker keeps, for the current threshold, every frequent itemset F and every itemset of
the negative border (infrequent, but all its one-smaller subsets frequent; Toivonen 1996,
Aumann et al. 1999) with its exact count in the window. Between two ticks it only looks at
the baskets that entered or left the window:

1. ``apply``: for each such basket, add or subtract one for every tracked itemset it holds.
   Items: a bincount. Pairs: every pair of frequent items (all are tracked: a pair of
   frequent items is frequent or on the border). Larger itemsets, level by level: the
   frequent itemsets a basket holds are joined (Apriori-style, inside the basket only) into
   the tracked itemsets one larger. All of it vectorised over the whole batch of baskets.
2. ``retarget``: with the new threshold (a time window changes its size, a user may change
   the support), every itemset whose count crossed it moves between F and the border. A
   newly frequent itemset extends the border by itemsets never tracked before; only those are
   counted over the window. Every minimal newly frequent itemset was on the old border, so
   nothing is missed.

The cost of a tick grows with the baskets that changed and with the border changes, not
with the window. Itemsets are item ids in increasing order.

Encoding: an itemset of size k >= 2 is keyed by ``(id of its first k-1 items) << 32 | last
item``, where the id of a frequent itemset is its position among the frequent itemsets of its
size (of a single item: the item id). Every tracked itemset has a frequent prefix, so every
tracked itemset has a key.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from stream_miner.baskets import BasketArrays
from stream_miner.pairs import KeyCounts, locate, pairs_in, unpack

Itemset = tuple[int, ...]
BasketSource = Callable[[np.ndarray], BasketArrays]  # baskets holding any of the flagged items
_SHIFT = np.int64(32)
_DENSE_PAIRS = 4096  # up to this many lattice items, pair lookups use a dense matrix


@dataclass
class _Level:
    """Tracked itemsets of one size (two items or more)."""

    counts: KeyCounts = field(default_factory=KeyCounts)  # non-zero counts by key
    frequent: np.ndarray = field(default_factory=lambda: np.empty(0, np.int64))  # sorted keys
    itemsets: np.ndarray = field(default_factory=lambda: np.empty((0, 0), np.int64))  # aligned


class _Lattice:
    """Frequent items and the tracked levels, with vectorised encoding of itemsets."""

    def __init__(self, frequent_items: np.ndarray, levels: list[_Level]) -> None:
        self.frequent_items = frequent_items
        self.levels = levels  # levels[0] holds pairs
        self._dense = np.full(frequent_items.size, -1, dtype=np.int64)  # item -> lattice position
        self._pair_flags: np.ndarray | None = None  # lattice pairs as a dense matrix, if small

    def add_pairs(self, level: _Level) -> None:
        """Set the pair level; small lattices also get a dense matrix for fast pair lookups."""
        self.levels.append(level)
        items = np.flatnonzero(self.frequent_items)
        if items.size <= _DENSE_PAIRS:
            self._dense[items] = np.arange(items.size)
            self._pair_flags = np.zeros((items.size, items.size), dtype=bool)
            first, second = unpack(level.frequent)
            self._pair_flags[self._dense[first], self._dense[second]] = True

    def pairs_frequent(self, first: np.ndarray, second: np.ndarray) -> np.ndarray:
        """Which pairs (first < second) are in the lattice."""
        if self._pair_flags is None:
            return locate(self.levels[0].frequent, (first << _SHIFT) | second)[1]
        inside = (first < self._dense.size) & (second < self._dense.size)
        out = np.zeros(first.size, dtype=bool)
        a, b = self._dense[first[inside]], self._dense[second[inside]]
        known = (a >= 0) & (b >= 0)
        hits = np.zeros(a.size, dtype=bool)
        hits[known] = self._pair_flags[a[known], b[known]]
        out[inside] = hits
        return out

    def encode(self, itemsets: np.ndarray) -> np.ndarray:
        """Key of every row (sorted items), or -1 where a proper prefix is not frequent."""
        size = itemsets.shape[1]
        ids = itemsets[:, 0].astype(np.int64)
        valid = self._item_frequent(ids)
        for column in range(1, size - 1):
            position, found = locate(self.levels[column - 1].frequent, (ids << _SHIFT) | itemsets[:, column])
            valid &= found
            ids = np.where(found, position, 0)
        keys = (ids << _SHIFT) | itemsets[:, size - 1]
        keys[~valid] = -1
        return keys

    def frequent_rows(self, itemsets: np.ndarray) -> np.ndarray:
        """Which rows are frequent itemsets."""
        size = itemsets.shape[1]
        if size == 1:
            return self._item_frequent(itemsets[:, 0])
        if size - 2 >= len(self.levels):
            return np.zeros(itemsets.shape[0], dtype=bool)
        if size == 2:
            return self.pairs_frequent(itemsets[:, 0], itemsets[:, 1])
        keys = self.encode(itemsets)
        return (keys >= 0) & locate(self.levels[size - 2].frequent, keys)[1]

    def all_subsets_frequent(self, itemsets: np.ndarray) -> np.ndarray:
        """Which rows have every one-smaller subset frequent (are tracked)."""
        return self._subsets_frequent(itemsets, itemsets.shape[1])

    def joined_tracked(self, joined: np.ndarray) -> np.ndarray:
        """Which rows of a join are tracked; dropping either of the last two items gives a
        joined (frequent) itemset, so only the other subsets are looked up."""
        return self._subsets_frequent(joined, joined.shape[1] - 2)

    def _subsets_frequent(self, itemsets: np.ndarray, columns: int) -> np.ndarray:
        keep = np.ones(itemsets.shape[0], dtype=bool)
        for column in range(columns):
            keep &= self.frequent_rows(np.delete(itemsets, column, axis=1))
        return keep

    def _item_frequent(self, items: np.ndarray) -> np.ndarray:
        inside = items < self.frequent_items.size
        out = np.zeros(items.size, dtype=bool)
        out[inside] = self.frequent_items[items[inside]]
        return out


class BorderTracker:
    """Frequent itemsets and their negative border with exact counts, kept up to date.

    ``max_len`` bounds itemset size. The threshold and the allowed items are given to
    :meth:`retarget` at every tick.

    Hysteresis: an itemset joins the tracked lattice when its count reaches the threshold
    and leaves it only when its count falls below ``(1 - margin)`` of the threshold, so an
    itemset hovering at the threshold does not make its supersets be counted over the window
    again at every tick. The lattice stays downward closed, and the result is exactly the
    itemsets at or above the threshold.
    """

    def __init__(self, max_len: int | None = None, margin: float = 0.25) -> None:
        if max_len is not None and max_len < 1:
            raise ValueError(f"max itemset length must be at least 1, got {max_len}")
        if not 0 <= margin < 1:
            raise ValueError(f"margin must lie in [0, 1), got {margin}")
        self.max_len = max_len
        self.margin = margin
        self.threshold: int | None = None
        self.item_counts = np.zeros(0, dtype=np.int64)
        self.lattice = _Lattice(np.zeros(0, dtype=bool), [])

    # ------------------------------------------------------------------- deltas
    def apply(self, baskets: BasketArrays, signs: np.ndarray) -> None:
        """Count baskets that entered (sign 1) or left (sign -1) the window, in one batch."""
        if len(baskets) == 0:
            return
        self._grow_items(int(baskets.items.max()) + 1)
        np.add.at(self.item_counts, baskets.items, signs[baskets.row_of_items()])
        levels = self.lattice.levels
        if self.threshold is None or not levels:
            return
        keys, rows = pairs_in(baskets, self.lattice.frequent_items)
        levels[0].counts.add(keys, signs[rows])
        first, second = unpack(keys)
        hot = self.lattice.pairs_frequent(first, second)
        held = np.column_stack([first[hot], second[hot]])
        rows = rows[hot]
        for level in levels[1:]:
            held, rows = _join(held, rows)
            tracked = self.lattice.joined_tracked(held)
            held, rows = held[tracked], rows[tracked]
            if held.shape[0] == 0:
                return
            keys = self.lattice.encode(held)
            level.counts.add(keys, signs[rows])
            hot = locate(level.frequent, keys)[1]
            held, rows = held[hot], rows[hot]

    # -------------------------------------------------------------- threshold
    def retarget(self, threshold: int, allowed: np.ndarray, window: BasketSource) -> None:
        """Move itemsets between the frequent set and the border for a new ``threshold``,
        counting newly tracked itemsets over ``window``."""
        if threshold < 1:
            raise ValueError(f"threshold must be at least 1, got {threshold}")
        self._grow_items(allowed.size)
        old = self.lattice
        keep_above = max(1, int(threshold * (1 - self.margin)))
        was = np.zeros(self.item_counts.size, dtype=bool)
        was[: old.frequent_items.size] = old.frequent_items
        counts = self.item_counts
        items = ((counts >= threshold) | was & (counts >= keep_above)) & allowed[: counts.size]
        self.threshold = threshold
        self.lattice = _Lattice(items, [])
        if self.max_len == 1:
            return
        pairs = old.levels[0].counts if old.levels else KeyCounts()
        pairs.drop_items(was & ~items)
        _count_pairs_of(pairs, items & ~was, items, window)
        hot = pairs.counts >= threshold
        if old.levels:
            margin = np.flatnonzero(~hot & (pairs.counts >= keep_above))
            hot[margin] = locate(old.levels[0].frequent, pairs.keys[margin])[1]
        frequent = pairs.keys[hot]
        self.lattice.add_pairs(_Level(pairs, frequent, np.column_stack(unpack(frequent))))
        size = 3
        while self.max_len is None or size <= self.max_len:
            candidates, _ = _join(self.lattice.levels[-1].itemsets, np.zeros(0, dtype=np.int64))
            candidates = candidates[self.lattice.joined_tracked(candidates)]
            if candidates.shape[0] == 0:
                break
            counts = np.zeros(candidates.shape[0], dtype=np.int64)
            known = old.all_subsets_frequent(candidates) if len(old.levels) >= size - 1 else (
                np.zeros(candidates.shape[0], dtype=bool)
            )
            if known.any():
                counts[known] = old.levels[size - 2].counts.count(old.encode(candidates[known]))
            counts[~known] = count_in(candidates[~known], window, self.item_counts)
            stays = (counts >= keep_above) & (old.frequent_rows(candidates) if len(old.levels) >= size - 1 else False)
            self.lattice.levels.append(self._level(candidates, counts, (counts >= threshold) | stays))
            size += 1

    def _level(self, candidates: np.ndarray, counts: np.ndarray, hot: np.ndarray) -> _Level:
        keys = self.lattice.encode(candidates)
        order = np.argsort(keys)
        keys, counts, candidates, hot = keys[order], counts[order], candidates[order], hot[order]
        level = _Level()
        present = counts > 0
        level.counts.keys, level.counts.counts = keys[present], counts[present]
        level.frequent, level.itemsets = keys[hot], candidates[hot]
        return level

    def _grow_items(self, n: int) -> None:
        if n > self.item_counts.size:
            self.item_counts = np.concatenate(
                [self.item_counts, np.zeros(n - self.item_counts.size, dtype=np.int64)]
            )

    # ------------------------------------------------------------------ result
    def itemsets(self) -> dict[Itemset, int]:
        """Every frequent itemset with its count."""
        threshold = self.threshold
        items = np.flatnonzero(self.lattice.frequent_items)
        items = items[self.item_counts[items] >= threshold]
        out: dict[Itemset, int] = dict(
            zip(((i,) for i in items.tolist()), self.item_counts[items].tolist(), strict=True)
        )
        for level in self.lattice.levels:
            counts = level.counts.count(level.frequent)
            hot = counts >= threshold
            out.update(zip(map(tuple, level.itemsets[hot].tolist()), counts[hot].tolist(), strict=True))
        return out


def _join(held: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Apriori join inside each basket: itemsets of size k held by the same basket that share
    their first k-1 items give the itemset of size k+1 (Agrawal & Srikant 1994).

    ``held`` is a matrix of sorted itemsets, ``rows`` the basket of each (empty: one basket).
    Returns the joined itemsets and their baskets. Vectorised: O(joined itemsets).
    """
    if rows.size == 0:
        rows = np.zeros(held.shape[0], dtype=np.int64)
    size = held.shape[1]
    if held.shape[0] < 2:
        return np.empty((0, size + 1), dtype=np.int64), np.empty(0, dtype=np.int64)
    order = np.lexsort((*held.T[::-1], rows))
    held, rows = held[order], rows[order]
    new_group = np.ones(held.shape[0], dtype=bool)
    new_group[1:] = (rows[1:] != rows[:-1]) | (held[1:, :-1] != held[:-1, :-1]).any(axis=1)
    heads = np.flatnonzero(new_group)
    last = held[:, -1]
    groups = BasketArrays.from_lengths(last, np.diff(np.append(heads, held.shape[0])))
    tails, group = pairs_in(groups, np.ones(int(last.max()) + 1, dtype=bool))
    middle, end = unpack(tails)
    joined = np.column_stack([held[heads[group], :-1], middle, end])
    return joined, rows[heads[group]]


def _count_pairs_of(pairs: KeyCounts, entering: np.ndarray, watched: np.ndarray, window: BasketSource) -> None:
    """Count, over the window, every pair of watched items that has an entering item."""
    if not entering.any():
        return
    keys, _ = pairs_in(window(entering), watched)
    first, second = unpack(keys)
    keys = keys[entering[first] | entering[second]]
    pairs.add(keys, np.ones(keys.size, dtype=np.int64))


def count_in(itemsets: np.ndarray, window: BasketSource, item_counts: np.ndarray) -> np.ndarray:
    """Exact counts of the itemsets (matrix rows) over the window (vertical counting): the
    baskets holding each itemset's rarest item are read from the window once, and their
    lists of baskets per item are intersected, rarest first."""
    if itemsets.shape[0] == 0:
        return np.zeros(0, dtype=np.int64)
    anchors = itemsets[np.arange(itemsets.shape[0]), np.argmin(item_counts[itemsets], axis=1)]
    anchor_flags = np.zeros(int(itemsets.max()) + 1, dtype=bool)
    anchor_flags[anchors] = True
    baskets = window(anchor_flags)
    items = np.unique(itemsets)
    flags = np.zeros(anchor_flags.size, dtype=bool)
    flags[items] = True
    keep = baskets.items < flags.size
    keep[keep] = flags[baskets.items[keep]]
    entries, rows = baskets.items[keep], baskets.row_of_items()[keep]
    order = np.argsort(entries, kind="stable")
    entries, rows = entries[order], rows[order]
    bounds = np.searchsorted(entries, np.append(items, items[-1] + 1))
    holders = {item: rows[bounds[k] : bounds[k + 1]] for k, item in enumerate(items.tolist())}
    counts = []
    for itemset, anchor in zip(itemsets.tolist(), anchors.tolist(), strict=True):
        common = holders[anchor]
        for item in itemset:
            if item != anchor and common.size:
                common = common[np.isin(common, holders[item], assume_unique=True)]
        counts.append(common.size)
    return np.array(counts, dtype=np.int64)
