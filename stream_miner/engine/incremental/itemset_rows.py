"""Itemsets held as rows of a matrix (item ids in increasing order along each row): lookups
of rows in other rows, and the Apriori candidate join."""

from __future__ import annotations

import numpy as np

from stream_miner.engine.baskets import offsets


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


def empty_rows(width: int) -> np.ndarray:
    """A matrix of no itemsets of ``width`` items."""
    return np.empty((0, width), dtype=np.int64)


def numbering(values: np.ndarray) -> np.ndarray:
    """The distinct non-negative ints of ``values`` numbered 0, 1, ... in increasing order,
    as a lookup array (value -> number; -1 for values in its range that do not occur).

    >>> numbering(np.array([[7, 2], [2, 4]])).tolist()
    [-1, -1, 0, -1, 1, -1, -1, 2]
    """
    present = np.zeros(int(values.max()) + 1 if values.size else 0, dtype=bool)
    present[values] = True
    return np.where(present, np.cumsum(present) - 1, -1)


def unique_rows(rows: np.ndarray) -> np.ndarray:
    """The distinct rows, in lexicographic order.

    >>> unique_rows(np.array([[2, 3], [1, 4], [2, 3]])).tolist()
    [[1, 4], [2, 3]]
    """
    if len(rows) < 2:
        return rows
    rows = rows[np.lexsort(rows.T[::-1])]
    heads = np.ones(len(rows), dtype=bool)
    heads[1:] = (rows[1:] != rows[:-1]).any(axis=1)
    return rows[heads]


class RowIndex:
    """Finds rows of a fixed matrix of itemsets (rows of equal width).

    Each row is packed into one int64 key, its items numbered among the matrix's distinct
    items (a mixed-radix number); when the keys would not fit in 62 bits, rows are matched
    by a lexicographic sort of both matrices instead.

    >>> RowIndex(np.array([[1, 2], [1, 5], [3, 4]])).find(np.array([[3, 4], [2, 3], [1, 2]])).tolist()
    [2, -1, 0]
    """

    def __init__(self, reference: np.ndarray) -> None:
        self.reference = reference
        self.number = numbering(reference)  # item id -> its number
        self.base = int(self.number.max()) + 1 if self.number.size else 0
        self.packs = self.base ** reference.shape[1] < 1 << 62
        if self.packs:
            keys, _ = self._keys(reference)
            self.order = np.argsort(keys, kind="stable")
            self.sorted_keys = keys[self.order]

    def find(self, query: np.ndarray) -> np.ndarray:
        """Index of each query row in the matrix (the first, if repeated), -1 where absent."""
        if self.reference.shape[0] == 0 or query.shape[0] == 0:
            return np.full(query.shape[0], -1, dtype=np.int64)
        if not self.packs:
            return _match_by_sorting(self.reference, query)
        keys, valid = self._keys(query)
        position = np.minimum(np.searchsorted(self.sorted_keys, keys), self.sorted_keys.size - 1)
        hit = valid & (self.sorted_keys[position] == keys)
        return np.where(hit, self.order[position], -1)

    def _keys(self, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Packed key of every row, and whether all its items occur in the matrix."""
        number = self.number[np.minimum(rows, self.number.size - 1)]
        number[rows >= self.number.size] = -1
        valid = (number >= 0).all(axis=1)
        keys = np.zeros(rows.shape[0], dtype=np.int64)
        for column in range(rows.shape[1]):
            keys = keys * self.base + number[:, column]
        return keys, valid


def match_rows(reference: np.ndarray, query: np.ndarray) -> np.ndarray:
    """Index of each query row in ``reference`` (rows of equal width), -1 where absent.

    >>> match_rows(np.array([[1, 2], [1, 5], [3, 4]]), np.array([[3, 4], [2, 3], [1, 2]])).tolist()
    [2, -1, 0]
    """
    return RowIndex(reference).find(query)


def _match_by_sorting(reference: np.ndarray, query: np.ndarray) -> np.ndarray:
    """:func:`match_rows` by one lexicographic sort of both matrices together (any width)."""
    n = reference.shape[0]
    both = np.concatenate([reference, query])
    order = np.lexsort((np.arange(both.shape[0]), *both.T[::-1]))  # equal rows: reference first
    ordered = both[order]
    heads = np.ones(order.size, dtype=bool)
    heads[1:] = (ordered[1:] != ordered[:-1]).any(axis=1)
    first_of_group = order[heads][np.cumsum(heads) - 1]
    found = np.empty(order.size, dtype=np.int64)
    found[order] = np.where(first_of_group < n, first_of_group, -1)
    return found[n:]


def join_candidates(frequent: np.ndarray) -> np.ndarray:
    """Apriori-gen (Agrawal & Srikant 1994): from frequent k-itemsets in lexicographic row
    order, every (k+1)-itemset whose k-subsets are all frequent, in lexicographic row order.

    Rows sharing their first k-1 items are joined pairwise; a candidate is kept when each
    subset that drops one of its first k-1 items is a row of ``frequent`` too.

    >>> join_candidates(np.array([[1, 2], [1, 3], [1, 4], [2, 3]])).tolist()
    [[1, 2, 3]]
    """
    n, k = frequent.shape
    if n < 2:
        return empty_rows(k + 1)
    heads = np.ones(n, dtype=bool)
    heads[1:] = (frequent[1:, :-1] != frequent[:-1, :-1]).any(axis=1)  # k = 1: one group
    first, second = index_pairs(offsets(np.diff(np.append(np.flatnonzero(heads), n))))
    candidates = np.column_stack([frequent[first], frequent[second, -1]])
    keep = np.ones(candidates.shape[0], dtype=bool)
    index = RowIndex(frequent)
    for column in range(k - 1):
        keep &= index.find(np.delete(candidates, column, axis=1)) >= 0
    return candidates[keep]
