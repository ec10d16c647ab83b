"""Pairs inside rows of a CSR layout (items inside baskets), enumerated with numpy."""

from __future__ import annotations

import numpy as np

from stream_miner.baskets import BasketArrays, offsets


def index_pairs(start: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Every pair of positions ``i < j`` that lie in the same row of a CSR layout with row
    offsets ``start``, row by row. O(pairs produced), vectorised.

    >>> first, second = index_pairs(np.array([0, 3, 4, 6]))
    >>> list(zip(first.tolist(), second.tolist()))
    [(0, 1), (0, 2), (1, 2), (4, 5)]
    """
    n = int(start[-1])
    row = np.repeat(np.arange(start.size - 1), np.diff(start))
    later = start[row + 1] - np.arange(n) - 1  # positions after each one in its row
    total = int(later.sum())
    if total == 0:
        return np.empty(0, dtype=np.int64), np.empty(0, dtype=np.int64)
    first = np.repeat(np.arange(n), later)
    second = np.arange(total) - np.repeat(np.cumsum(later) - later - np.arange(n) - 1, later)
    return first, second


def pairs_in(baskets: BasketArrays, watched: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Every pair of watched items inside each basket: first items, second items (in basket
    order, not sorted) and the basket of each pair.

    ``watched`` is a boolean mask over item ids (ids past its end are not watched).

    >>> first, second, rows = pairs_in(BasketArrays.from_lists([[4, 1, 2], [2, 4]]), np.ones(5, bool))
    >>> first.tolist(), second.tolist(), rows.tolist()
    ([4, 4, 1, 2], [1, 2, 2, 4], [0, 0, 0, 1])
    """
    keep = baskets.items < watched.size
    keep[keep] = watched[baskets.items[keep]]
    items = baskets.items[keep]
    rows = baskets.row_of_items()[keep]
    first, second = index_pairs(offsets(np.bincount(rows, minlength=len(baskets))))
    return items[first], items[second], rows[first]
