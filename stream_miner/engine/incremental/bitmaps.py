"""Vertical bitmaps: counting itemsets in a batch of baskets with bitwise AND and popcount.

For a batch of baskets, every item gets one row of bits (bit ``r`` set when basket ``r``
holds the item). The count of an itemset in the batch is the popcount of the AND of its
items' rows: the vertical layout of Eclat (Zaki 2000) held as bitmaps, as in MAFIA
(Burdick, Calimlim & Gehrke 2001). Counting ``n`` itemsets of ``k`` items in ``b`` baskets
costs ``n * k * b / 64`` word operations in a few numpy passes.
"""

from __future__ import annotations

import threading
from collections.abc import Callable

import numpy as np

from stream_miner.engine.baskets import BasketArrays
from stream_miner.engine.incremental.itemset_rows import numbering
from stream_miner.engine.limits import stop_if_set

BasketSource = Callable[[np.ndarray], BasketArrays]  # the window's baskets holding any flagged item
WORDS_IN_FLIGHT = 1 << 21  # bitmap words gathered per numpy pass (16 MiB), bounds memory
BASKETS_PER_PASS = 1 << 16  # window baskets turned into bitmaps at once


def item_bitmaps(baskets: BasketArrays, slot_of: np.ndarray, n_slots: int) -> np.ndarray:
    """Bit rows (``n_slots`` x words, uint64) of the baskets: item ``i`` sets bits in row
    ``slot_of[i]``; items past the end of ``slot_of`` or with slot -1 are left out."""
    words = (len(baskets) + 63) // 64
    bits = np.zeros(n_slots * words, dtype=np.uint64)
    items = baskets.items
    inside = items < slot_of.size
    slots = np.full(items.size, -1, dtype=np.int64)
    slots[inside] = slot_of[items[inside]]
    kept = slots >= 0
    rows = baskets.row_of_items()[kept]
    np.bitwise_or.at(
        bits, slots[kept] * words + (rows >> 6), np.left_shift(np.uint64(1), (rows & 63).astype(np.uint64))
    )
    return bits.reshape(n_slots, words)


def sign_bitmap(signs: np.ndarray) -> np.ndarray:
    """One bit row with bit ``r`` set where ``signs[r] > 0``."""
    words = (signs.size + 63) // 64
    flags = np.zeros(words * 64, dtype=bool)
    flags[: signs.size] = signs > 0
    return np.packbits(flags, bitorder="little").view(np.uint64)


def count_rows(
    itemsets: np.ndarray,
    bits: np.ndarray,
    plus: np.ndarray | None = None,
    interrupt: threading.Event | None = None,
) -> np.ndarray:
    """Count of every itemset (rows of slots into ``bits``) in the batch.

    With ``plus`` (a bit row), baskets with their bit set count +1 and the others -1.
    ``interrupt`` is checked between passes (``MiningInterrupted`` once set).
    """
    n, k = itemsets.shape
    out = np.empty(n, dtype=np.int64)
    step = max(1, WORDS_IN_FLIGHT // max(1, bits.shape[1]))
    for lo in range(0, n, step):
        stop_if_set(interrupt)
        rows = itemsets[lo : lo + step]
        held = bits[rows[:, 0]]
        for column in range(1, k):
            held &= bits[rows[:, column]]
        total = np.bitwise_count(held).sum(axis=1, dtype=np.int64)
        if plus is not None:
            total = 2 * np.bitwise_count(held & plus).sum(axis=1, dtype=np.int64) - total
        out[lo : lo + step] = total
    return out


def window_counts(
    itemsets: np.ndarray,
    window: BasketSource,
    item_counts: np.ndarray,
    interrupt: threading.Event | None = None,
) -> np.ndarray:
    """Exact count over the window of every itemset (rows of item ids).

    Only baskets holding some itemset's rarest item (by ``item_counts``) are read; every
    basket that holds an itemset holds its rarest item.
    """
    n = itemsets.shape[0]
    if n == 0:
        return np.zeros(0, dtype=np.int64)
    anchors = itemsets[np.arange(n), np.argmin(item_counts[itemsets], axis=1)]
    flags = np.zeros(int(itemsets.max()) + 1, dtype=bool)
    flags[anchors] = True
    baskets = window(flags)
    slot_of = numbering(itemsets)
    return batch_counts(baskets, [slot_of[itemsets]], slot_of, int(slot_of.max()) + 1, interrupt=interrupt)[0]


def batch_counts(
    baskets: BasketArrays,
    itemsets: list[np.ndarray],
    slot_of: np.ndarray,
    n_slots: int,
    signs: np.ndarray | None = None,
    interrupt: threading.Event | None = None,
) -> list[np.ndarray]:
    """Count of every itemset (matrices of slots, see :func:`item_bitmaps`) in the baskets,
    signed by ``signs`` if given; bitmaps are built for ``BASKETS_PER_PASS`` baskets at once.
    ``interrupt`` is checked between passes (``MiningInterrupted`` once set)."""
    counts = [np.zeros(len(rows), dtype=np.int64) for rows in itemsets]
    for first in range(0, len(baskets), BASKETS_PER_PASS):
        bits = item_bitmaps(baskets.part(first, first + BASKETS_PER_PASS), slot_of, n_slots)
        plus = None if signs is None else sign_bitmap(signs[first : first + BASKETS_PER_PASS])
        for total, rows in zip(counts, itemsets, strict=True):
            total += count_rows(rows, bits, plus, interrupt)
    return counts
