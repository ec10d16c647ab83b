"""Incremental mining: exact counts of the frequent itemsets and their negative border.

The tracker keeps, for the current threshold, every frequent itemset F and every itemset of
the negative border (infrequent, but all its one-smaller subsets frequent; Toivonen 1996,
Aumann et al. 1999) with its exact count in the window. Between two ticks it only looks at
the baskets that entered or left the window, and at what crossed the threshold:

1. ``apply``: items by a bincount; pairs of watched items in a dense pair table (every pair
   of two frequent items is frequent or on the border, so the table holds all of them); the
   tracked itemsets of three items or more by vertical bitmaps of the changed baskets.
2. ``retarget``: with the new threshold (a time window changes its size, a user may change
   the support), itemsets move between F and the border. A level changes only where the
   frequent itemsets one smaller changed: candidates that lost a frequent subset stop being
   candidates, and the extensions of newly frequent itemsets by one frequent item become
   candidates; rows tracked before keep their counts, and only the others are counted over
   the window. Every minimal newly frequent itemset was on the old border, so nothing is
   missed.

Hysteresis: an itemset joins F when its count reaches the threshold and leaves it only when
its count falls below ``(1 - margin)`` of it, so one hovering at the threshold does not make
its supersets be counted over the window again at every tick. F stays downward closed, and
the result is exactly the itemsets at or above the threshold. Items are watched in the pair
table from that lower bound on, and until their count halves again.

The cost of a tick grows with the baskets that changed and with what crossed the threshold,
not with the window. Itemsets are rows of item ids in increasing order.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass

import numpy as np

from stream_miner.engine.baskets import BasketArrays
from stream_miner.engine.incremental.bitmaps import BasketSource, batch_counts, window_counts
from stream_miner.engine.incremental.itemset_rows import (
    RowIndex,
    empty_rows,
    join_candidates,
    match_rows,
    numbering,
    unique_rows,
)
from stream_miner.engine.incremental.pair_table import PairTable
from stream_miner.engine.limits import stop_if_set, too_many_itemsets

Itemset = tuple[int, ...]
MAX_WATCHED = 4096  # items in the pair table at most (a 32 MiB triangle); beyond, no tracking
EXTENSIONS_IN_FLIGHT = 1 << 18  # rows of one-item extensions built at once, at most


@dataclass(frozen=True)
class _Level:
    """Tracked itemsets of one size (three items or more), with counts: the candidates (every
    one-smaller subset frequent: F and its border) and, kept counted while their count stays
    near the threshold, former candidates, so that they need no recount when they return."""

    itemsets: np.ndarray  # rows of item ids, in no particular order
    counts: np.ndarray  # int64, aligned
    candidate: np.ndarray  # bool, aligned
    frequent: np.ndarray  # bool, aligned

    def frequent_rows(self) -> np.ndarray:
        return self.itemsets[self.frequent]


class _Found:
    """Frequent itemsets counted so far in a retarget, against the cap."""

    def __init__(self, count: int, cap: int | None) -> None:
        self.count, self.cap = count, cap
        self.add(0)

    def add(self, more: int) -> None:
        """Count ``more``; raise ``ResultTooLarge`` once over the cap."""
        self.count += more
        if self.cap is not None and self.count > self.cap:
            raise too_many_itemsets(self.count, self.cap)


class BorderTracker:
    """Frequent itemsets and their negative border with exact counts, kept up to date.

    ``max_size`` bounds itemset size. The threshold and the allowed items are given to
    :meth:`retarget` at every tick. When more than ``max_watched`` items would need pair
    counts, :meth:`retarget` declines (returns False) and the caller mines in full; only item
    counts are kept until the window narrows again.
    """

    def __init__(
        self, max_size: int | None = None, margin: float = 0.25, max_watched: int = MAX_WATCHED
    ) -> None:
        if max_size is not None and max_size < 1:
            raise ValueError(f"max_size must be at least 1, got {max_size}")
        if not 0 <= margin < 1:
            raise ValueError(f"margin must lie in [0, 1), got {margin}")
        self.max_size = max_size
        self.margin = margin
        self.max_watched = max_watched
        self.threshold: int | None = None
        self.item_counts = np.zeros(0, dtype=np.int64)
        self.frequent_items = np.zeros(0, dtype=bool)
        self.table: PairTable | None = None  # None: pairs not tracked (yet, or too many items)
        self.pairs = empty_rows(2)  # frequent pairs
        self.levels: list[_Level] = []  # sizes 3, 4, ...
        self._touched = [empty_rows(2)]  # pairs counted up to the threshold since the last retarget

    # ------------------------------------------------------------------- deltas
    def apply(
        self, baskets: BasketArrays, signs: np.ndarray, interrupt: threading.Event | None = None
    ) -> None:
        """Count baskets that entered (sign 1) or left (sign -1) the window, in one batch.
        Interrupted (``MiningInterrupted``), the tracker is left half updated: drop it."""
        if len(baskets) == 0:
            return
        self._grow_items(int(baskets.items.max()) + 1)
        self.item_counts += np.bincount(
            baskets.items, weights=signs[baskets.row_of_items()], minlength=self.item_counts.size
        ).astype(np.int64)
        if self.table is None or self.threshold is None:
            return
        self._touched.append(self.table.add(baskets, signs, self.threshold))
        if self.levels:
            slot_of = numbering(np.concatenate([level.itemsets.ravel() for level in self.levels]))
            found = batch_counts(
                baskets,
                [slot_of[level.itemsets] for level in self.levels],
                slot_of,
                int(slot_of.max()) + 1,
                signs,
                interrupt,
            )
            self.levels = [
                _Level(level.itemsets, level.counts + more, level.candidate, level.frequent)
                for level, more in zip(self.levels, found, strict=True)
            ]

    # -------------------------------------------------------------- threshold
    def retarget(
        self,
        threshold: int,
        allowed: np.ndarray,
        window: BasketSource,
        *,
        max_itemsets: int | None = None,
        interrupt: threading.Event | None = None,
    ) -> bool:
        """Move itemsets between F and the border for a new ``threshold``, counting newly
        tracked itemsets over ``window``. False when too many items would need pair counts
        (the result is then not tracked; mine in full).

        More than ``max_itemsets`` frequent itemsets raise ``ResultTooLarge`` as soon as a
        level brings the count over it (before the next level is built); a set
        ``interrupt`` raises ``MiningInterrupted``. Either leaves the tracker half updated:
        drop it.
        """
        if threshold < 1:
            raise ValueError(f"threshold must be at least 1, got {threshold}")
        stop_if_set(interrupt)
        self._grow_items(allowed.size)
        allowed = np.concatenate([allowed, np.zeros(self.item_counts.size - allowed.size, dtype=bool)])
        keep_above = max(1, int(threshold * (1 - self.margin)))
        counts = self.item_counts
        was = self.frequent_items
        items = ((counts >= threshold) | was & (counts >= keep_above)) & allowed
        same_threshold = threshold == self.threshold and self.table is not None
        self.threshold, self.frequent_items = threshold, items
        touched, self._touched = np.concatenate(self._touched), [empty_rows(2)]
        found = _Found(int((items & (counts >= threshold)).sum()), max_itemsets)
        if self.max_size == 1:
            return True
        wanted = self._watch_list(allowed, keep_above)
        if wanted is None:
            self.table, self.pairs, self.levels = None, empty_rows(2), []
            return False
        if self.table is None:
            self.table = PairTable()
        self.table.watch(wanted, window, self.item_counts)
        stop_if_set(interrupt)
        if same_threshold:
            entering = np.flatnonzero(items & ~was)
            candidates = np.concatenate(
                [self.pairs, touched, self.table.pairs_with(entering, items, threshold)]
            )
            candidates = unique_rows(candidates[items[candidates].all(axis=1)])
        else:
            candidates = self.table.pairs_among(items, keep_above)
        pair_counts = self.table.count(candidates[:, 0], candidates[:, 1])
        hot = self._hot(pair_counts, match_rows(self.pairs, candidates) >= 0, keep_above)
        old_pairs, self.pairs = self.pairs, candidates[hot]
        found.add(int((pair_counts[hot] >= threshold).sum()))
        if self.max_size != 2:
            self._retarget_levels(old_pairs, keep_above, window, found, interrupt)
        return True

    def _watch_list(self, allowed: np.ndarray, keep_above: int) -> np.ndarray | None:
        """Items to keep pair counts for: those counted at least half of ``keep_above``
        when the table starts; later, items that reach ``keep_above``, kept until they fall
        below half of it. None when that is more than ``max_watched``."""
        counts = self.item_counts
        stay = counts >= max(1, keep_above // 2)
        if self.table is None:
            wanted = allowed & stay
        else:
            wanted = allowed & ((counts >= keep_above) | self.table.watched_among(counts.size) & stay)
        return None if wanted.sum() > self.max_watched else wanted

    def _retarget_levels(
        self,
        old_below: np.ndarray,
        keep_above: int,
        window: BasketSource,
        found: _Found,
        interrupt: threading.Event | None,
    ) -> None:
        """Bring each level of three items or more in line with the frequent itemsets one
        smaller, level by level upwards."""
        below, levels = self.pairs, []
        for size in range(3, (self.max_size or 1 << 30) + 1):
            stop_if_set(interrupt)
            old = self.levels[size - 3] if size - 3 < len(self.levels) else None
            if old is None and len(below) < 2:
                break
            level = self._next_level(old, old_below, below, keep_above, window, interrupt)
            if len(level.itemsets) == 0:
                break
            found.add(int((level.candidate & (level.counts >= self.threshold)).sum()))
            levels.append(level)
            old_below = empty_rows(size) if old is None else old.frequent_rows()
            below = level.frequent_rows()
        self.levels = levels

    def _next_level(
        self,
        old: _Level | None,
        old_below: np.ndarray,
        below: np.ndarray,
        keep_above: int,
        window: BasketSource,
        interrupt: threading.Event | None,
    ) -> _Level:
        """The level one larger than the frequent itemsets ``below`` (formerly ``old_below``).

        Candidates that lost a frequent subset stop being candidates; new candidates are the
        extensions of newly frequent itemsets by one frequent item (or, when much changed,
        a full Apriori join). Rows tracked before keep their counts; only the others are
        counted over the window. Former candidates stay while counted at least half of
        ``keep_above``.
        """
        size = below.shape[1] + 1
        if old is None:
            old = _Level(empty_rows(size), np.zeros(0, np.int64), np.zeros(0, bool), np.zeros(0, bool))
        rows, counts, candidate, was = old.itemsets, old.counts, old.candidate, old.frequent
        if not np.array_equal(below, old_below):
            below_index = RowIndex(below)
            removed = old_below[below_index.find(old_below) < 0]
            added = below[RowIndex(old_below).find(below) < 0]
            fresh = self._new_candidates(below_index, added)
            if fresh is None:  # full join: the candidates are exactly its rows
                fresh, candidate = join_candidates(unique_rows(below)), np.zeros(len(rows), dtype=bool)
            elif len(removed):
                lost = np.zeros(len(rows), dtype=bool)
                gone = RowIndex(removed)
                for column in range(size):
                    lost |= gone.find(np.delete(rows, column, axis=1)) >= 0
                candidate = candidate & ~lost
            known = RowIndex(rows).find(fresh)
            candidate = candidate.copy()
            candidate[known[known >= 0]] = True
            new = fresh[known < 0]
            rows = np.concatenate([rows, new])
            counts = np.concatenate([counts, window_counts(new, window, self.item_counts, interrupt)])
            candidate = np.concatenate([candidate, np.ones(len(new), dtype=bool)])
            was = np.concatenate([was, np.zeros(len(new), dtype=bool)])
        hot = candidate & self._hot(counts, was, keep_above)
        keep = candidate | (counts >= max(1, keep_above // 2))
        return _Level(rows[keep], counts[keep], candidate[keep], hot[keep])

    def _new_candidates(self, below: RowIndex, added: np.ndarray) -> np.ndarray | None:
        """Itemsets one larger holding a newly frequent itemset (a row of ``added``) whose
        every subset one smaller is a row of ``below``: each added row extended by one
        frequent item. None when that would be larger than a full join."""
        items = np.flatnonzero(self.frequent_items)
        if len(added) * items.size > max(EXTENSIONS_IN_FLIGHT, 2 * len(below.reference) ** 2):
            return None
        grown = np.sort(
            np.column_stack([np.repeat(added, items.size, axis=0), np.tile(items, len(added))]), axis=1
        )
        grown = grown[(grown[:, 1:] != grown[:, :-1]).all(axis=1)]
        for column in range(grown.shape[1]):
            grown = grown[below.find(np.delete(grown, column, axis=1)) >= 0]
        return unique_rows(grown)

    def _hot(self, counts: np.ndarray, was: np.ndarray, keep_above: int) -> np.ndarray:
        """Frequent under hysteresis: at the threshold, or frequent before and not far below."""
        return (counts >= self.threshold) | was & (counts >= keep_above)

    def _grow_items(self, n: int) -> None:
        if n > self.item_counts.size:
            grow = n - self.item_counts.size
            self.item_counts = np.concatenate([self.item_counts, np.zeros(grow, dtype=np.int64)])
            self.frequent_items = np.concatenate([self.frequent_items, np.zeros(grow, dtype=bool)])

    # ------------------------------------------------------------------ result
    def itemsets(self) -> dict[Itemset, int]:
        """Every frequent itemset with its count (after a :meth:`retarget` that returned True)."""
        threshold = self.threshold
        assert threshold is not None, "itemsets() needs a retarget() first"
        items = np.flatnonzero(self.frequent_items & (self.item_counts >= threshold))
        out: dict[Itemset, int] = dict(
            zip(((i,) for i in items.tolist()), self.item_counts[items].tolist(), strict=True)
        )
        groups = (
            [] if self.table is None else [(self.pairs, self.table.count(self.pairs[:, 0], self.pairs[:, 1]))]
        )
        for itemsets, counts in groups + [
            (level.itemsets, level.counts * level.candidate) for level in self.levels
        ]:
            hot = counts >= threshold
            out.update(zip(map(tuple, itemsets[hot].tolist()), counts[hot].tolist(), strict=True))
        return out
