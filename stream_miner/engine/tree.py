"""Prefix tree (FP-tree style) over the baskets of a window, with exact insert and expire.

Layout: struct of numpy arrays. Node ``n`` has ``key[n] = (parent << 32) | item``,
``count[n]`` (baskets whose path passes through ``n``) and ``tail[n]`` (baskets whose path
ends at ``n``). Children are found through a hash index of keys (:mod:`node_index`).
Freed nodes go on a free list and are reused, so the number of live nodes always equals
that of a tree freshly built from the same baskets. Node 0 is the root; its count is the
number of baskets in the tree. A node costs about 25 bytes (key, counts, index slot).

Updates come in batches (:meth:`PrefixTree.update`): inserted paths are walked level by
level for all baskets at once, and expired baskets are removed by their handle (the node
where their path ends) by walking parent links upwards, vectorised. Single-basket
:meth:`insert` and :meth:`expire` are batches of one.

Item order: every basket is stored as a path sorted by the tree's ``rank`` of each item
(smaller rank nearer the root), a permutation of the item ids; items first seen later are
appended to it in id order. Any fixed order
gives exact mining; a frequency-descending order gives a more compact tree. Changing the
order means rebuilding (:meth:`PrefixTree.build`), which the engine does on a schedule.
The header table (item totals and node links) is built on demand by :func:`header_table`.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass

import numpy as np

from stream_miner.engine.baskets import BasketArrays
from stream_miner.engine.node_index import NodeIndex

ROOT = 0
_SHIFT = np.int64(32)
_ITEM_MASK = np.int64(0xFFFFFFFF)
_GROWTH = 1.25


@dataclass(frozen=True)
class TreeArrays:
    """A copy of the tree as numpy arrays, ready for mining.

    Dead (freed) slots have ``count == 0``; the root has parent -1 and item -1.
    """

    item: np.ndarray
    parent: np.ndarray
    count: np.ndarray
    rank: np.ndarray  # rank of each item id: a permutation of 0..len-1
    n_baskets: int


@dataclass(frozen=True)
class HeaderTable:
    """Per-item totals and node links: ``nodes[start[i]:start[i+1]]`` are the nodes of item i."""

    item_count: np.ndarray
    nodes: np.ndarray
    start: np.ndarray

    def nodes_of(self, item: int) -> np.ndarray:
        """Node ids holding ``item`` (its node-link chain)."""
        if item >= len(self.item_count):
            return self.nodes[:0]
        return self.nodes[self.start[item] : self.start[item + 1]]


class PrefixTree:
    """FP-tree style prefix tree supporting exact insert and expire of baskets.

    >>> tree = PrefixTree(rank=[1, 0])          # item 1 goes nearer the root
    >>> handles = [tree.insert([0, 1]), tree.insert([1])]
    >>> tree.node_count(), tree.n_baskets
    (2, 2)
    >>> tree.expire([1, 0]); tree.node_count()
    1
    >>> tree.paths()
    {(1,): 1}
    """

    __slots__ = ("_count", "_free", "_index", "_item_at_rank", "_key", "_n_free", "_rank", "_tail", "_used")

    def __init__(self, rank: Sequence[int] | np.ndarray = (), capacity_hint: int = 1024) -> None:
        capacity = max(16, capacity_hint)
        self._key = np.full(capacity, -1, dtype=np.int64)
        self._count = np.zeros(capacity, dtype=np.int32)
        self._tail = np.zeros(capacity, dtype=np.int32)
        self._used = 1  # slots handed out so far (root included)
        self._free = np.empty(0, dtype=np.int64)
        self._n_free = 0
        self._index = NodeIndex(capacity)
        self._rank = np.asarray(rank, dtype=np.int64).copy()
        if not np.array_equal(np.sort(self._rank), np.arange(self._rank.size)):
            raise ValueError("rank must be a permutation of 0..len(rank)-1")
        self._item_at_rank = np.argsort(self._rank)

    # ----------------------------------------------------------------- ordering
    @property
    def rank(self) -> np.ndarray:
        """Rank of each item id (a copy): a permutation of 0..len-1."""
        return self._rank.copy()

    def _ensure_ranked(self, max_item: int) -> None:
        if max_item >= self._rank.size:
            extra = np.arange(self._rank.size, max_item + 1, dtype=np.int64)
            self._rank = np.concatenate([self._rank, extra])
            self._item_at_rank = np.concatenate([self._item_at_rank, extra])

    def path_of(self, basket: Iterable[int]) -> list[int]:
        """The basket's items in tree order (the path it takes from the root)."""
        return self.paths_of([list(basket)]).items.tolist()

    def paths_of(self, baskets: Sequence[Sequence[int]]) -> BasketArrays:
        """Sort each basket's items into tree order, vectorised."""
        return self.order_paths(BasketArrays.from_lists(baskets))

    def order_paths(self, baskets: BasketArrays) -> BasketArrays:
        """Sort the items of each basket into tree order: the paths the baskets take."""
        items = baskets.items
        if items.size == 0:
            return baskets
        if items.min() < 0 or items.max() > _ITEM_MASK:
            raise ValueError("item ids must lie in 0..2**32-1")
        self._ensure_ranked(int(items.max()))
        keys = (baskets.row_of_items() << _SHIFT) | self._rank[items]
        keys.sort()
        return BasketArrays(self._item_at_rank[keys & _ITEM_MASK], baskets.start)

    # ------------------------------------------------------------------ updates
    def insert(self, basket: Iterable[int]) -> int:
        """Add one basket (distinct item ids); return its handle (the node where it ends)."""
        return int(self.update(self.paths_of([list(basket)]), ())[0])

    def expire(self, basket: Iterable[int]) -> None:
        """Remove one earlier inserted basket; raise ValueError (changing nothing) if absent."""
        self.update(BasketArrays.empty(), [self.handle_of(basket)])

    def handle_of(self, basket: Iterable[int]) -> int:
        """The handle of a stored basket; ValueError when no stored basket has these items."""
        path = self.path_of(basket)
        node = ROOT
        for item in path:
            found = self._index.find(np.array([(node << 32) | item], dtype=np.int64), self._key)
            node = int(found[0])
            if node < 0:
                break
        if not path or node < 0 or self._tail[node] == 0:
            raise ValueError(f"basket is not in the tree: {path}")
        return node

    def update(self, paths: BasketArrays, expired: Sequence[int] | np.ndarray) -> np.ndarray:
        """Expire baskets given by handle, then insert baskets given as paths in tree order.

        Returns the handles of the inserted baskets, in order. Expired handles are checked
        first, so a bad call changes nothing. Cost: O(depth) numpy passes over the batch.
        """
        expired = np.asarray(expired, dtype=np.int64)
        lengths = np.diff(paths.start)
        if (lengths == 0).any():
            raise ValueError("cannot insert an empty basket")
        if expired.size:
            self._check_handles(expired)
            self._remove(expired)
        return self._add(paths, lengths)

    def _check_handles(self, handles: np.ndarray) -> None:
        if handles.min() <= ROOT or handles.max() >= self._used:
            raise ValueError("expire of a handle that ends no stored basket")
        distinct, uses = np.unique(handles, return_counts=True)
        if (uses > self._tail[distinct]).any():
            raise ValueError("expire of a handle that ends no stored basket (or too often)")

    def _add(self, paths: BasketArrays, lengths: np.ndarray) -> np.ndarray:
        n = lengths.size
        handles = np.zeros(n, dtype=np.int64)
        if n == 0:
            return handles
        self._count[ROOT] += n
        by_length = np.argsort(-lengths, kind="stable")
        sorted_lengths = lengths[by_length]
        row_start = paths.start[:-1][by_length]
        ascending = sorted_lengths[::-1]
        nodes = np.zeros(n, dtype=np.int64)
        for depth in range(int(sorted_lengths[0])):
            width = n - int(np.searchsorted(ascending, depth, side="right"))
            active = nodes[:width]
            keys = (active << _SHIFT) | paths.items[row_start[:width] + depth]
            found = self._index.find(keys, self._key)
            missing = found < 0
            if missing.any():
                new_keys, inverse = np.unique(keys[missing], return_inverse=True)
                created = self._allocate(new_keys.size)
                self._key[created] = new_keys
                self._index.add(new_keys, created, self._key)
                found[missing] = created[inverse]
            np.add.at(self._count, found, np.ones(found.size, dtype=np.int32))
            nodes[:width] = found
        np.add.at(self._tail, nodes, np.ones(n, dtype=np.int32))
        handles[by_length] = nodes
        return handles

    def _remove(self, handles: np.ndarray) -> None:
        self._count[ROOT] -= handles.size
        np.add.at(self._tail, handles, np.full(handles.size, -1, dtype=np.int32))
        touched = []
        nodes = handles
        while nodes.size:
            touched.append(nodes)
            nodes = self._key[nodes] >> _SHIFT
            nodes = nodes[nodes != ROOT]
        all_nodes = np.concatenate(touched)
        np.add.at(self._count, all_nodes, np.full(all_nodes.size, -1, dtype=np.int32))
        dead = all_nodes[self._count[all_nodes] == 0]
        if dead.size:
            dead.sort()
            dead = dead[np.append(True, dead[1:] != dead[:-1])]
            self._index.remove(self._key[dead], self._key)
            self._key[dead] = -1
            self._push_free(dead)

    def _allocate(self, n: int) -> np.ndarray:
        take = min(n, self._n_free)
        reused = self._free[self._n_free - take : self._n_free].copy()
        self._n_free -= take
        fresh = n - take
        if self._used + fresh > self._key.size:
            self._grow(self._used + fresh)
        new = np.arange(self._used, self._used + fresh, dtype=np.int64)
        self._used += fresh
        return np.concatenate([reused, new])

    def _push_free(self, nodes: np.ndarray) -> None:
        if self._n_free + nodes.size > self._free.size:
            grown = np.empty(max(2 * self._free.size, self._n_free + nodes.size), dtype=np.int64)
            grown[: self._n_free] = self._free[: self._n_free]
            self._free = grown
        self._free[self._n_free : self._n_free + nodes.size] = nodes
        self._n_free += nodes.size

    def _grow(self, needed: int) -> None:
        """Enlarge the node arrays in place (realloc: no second copy held at once)."""
        old = self._key.size
        capacity = max(needed, int(old * _GROWTH))
        for array, fill in ((self._key, -1), (self._count, 0), (self._tail, 0)):
            array.resize(capacity, refcheck=False)
            array[old:] = fill

    # ------------------------------------------------------------------ queries
    @property
    def n_baskets(self) -> int:
        """Number of baskets currently in the tree."""
        return int(self._count[ROOT])

    def node_count(self) -> int:
        """Number of live nodes, root excluded."""
        return len(self._index)

    def nbytes(self) -> int:
        """Memory held by the node arrays, the free list and the hash index."""
        return (
            self._key.nbytes
            + self._count.nbytes
            + self._tail.nbytes
            + self._free.nbytes
            + (self._index.nbytes)
        )

    def arrays(self) -> TreeArrays:
        """Copy the tree into numpy arrays for mining. O(slots)."""
        key = self._key[: self._used]
        parent = np.where(key >= 0, key >> _SHIFT, -1)
        item = np.where(key >= 0, key & _ITEM_MASK, -1).astype(np.int32)
        return TreeArrays(
            item=item,
            parent=parent.astype(np.int32),
            count=self._count[: self._used].astype(np.int64),
            rank=self._rank.copy(),
            n_baskets=self.n_baskets,
        )

    def most_flagged_path(self, min_count: int, flagged: np.ndarray) -> int:
        """The most items flagged in the boolean ``flagged`` (over item ids) on the path to
        one node counted at least ``min_count``. O(slots) plus a climb from those nodes."""
        nodes = np.flatnonzero(self._count[1 : self._used] >= min_count) + 1
        key = self._key
        return most_flagged_on_a_path(nodes, lambda n: (key[n] & _ITEM_MASK, key[n] >> _SHIFT), flagged)

    def paths(self) -> dict[tuple[int, ...], int]:
        """Every stored path (in tree order) with the number of baskets that end on it."""
        out = {}
        for node in np.flatnonzero(self._tail[: self._used] > 0).tolist():
            out[self._path_to(node)] = int(self._tail[node])
        return out

    def _path_to(self, node: int) -> tuple[int, ...]:
        items = []
        while node != ROOT:
            key = int(self._key[node])
            items.append(key & 0xFFFFFFFF)
            node = key >> 32
        return tuple(reversed(items))

    def check_invariants(self) -> None:
        """Raise AssertionError when the structure is inconsistent. O(slots)."""
        used = self._used
        key, count, tail = self._key[:used], self._count[:used], self._tail[:used]
        live = np.flatnonzero(key >= 0)
        free = self._free[: self._n_free]
        assert key[ROOT] == -1, "the root has a key"
        assert np.intersect1d(live, free).size == 0, "a free node is still live"
        assert live.size + free.size + 1 == used, "node slots leak"
        assert len(self._index) == live.size, "hash index and live nodes disagree"
        assert np.array_equal(np.sort(self._index.node_ids()), live), "index holds wrong nodes"
        assert np.array_equal(self._index.find(key[live], self._key), live), "index lookup fails"
        assert (count[live] > 0).all(), "a live node has a zero count"
        assert (count[free] == 0).all() and (tail[free] == 0).all(), "a free node holds counts"
        parent = key[live] >> _SHIFT
        assert np.isin(parent, np.append(live, ROOT)).all(), "a live node has a dead parent"
        below = np.bincount(parent, weights=count[live], minlength=used)
        assert np.array_equal(count, below.astype(np.int64) + tail), "count != children + tail"
        rank_of = np.append(self._rank, 0)  # index -1 (the root) maps to a dummy rank
        child_rank = rank_of[key[live] & _ITEM_MASK]
        parent_item = np.where(parent == ROOT, -1, key[parent] & _ITEM_MASK)
        assert (rank_of[parent_item][parent != ROOT] < child_rank[parent != ROOT]).all(), (
            "a path is out of tree order"
        )

    # -------------------------------------------------------------- rebuilding
    @classmethod
    def build(cls, baskets: Sequence[Sequence[int]], rank: Sequence[int] | np.ndarray = ()) -> PrefixTree:
        """A fresh tree with item order ``rank`` holding ``baskets``."""
        tree = cls(rank, capacity_hint=4 * len(baskets) + 16)
        tree.update(tree.paths_of(baskets), ())
        return tree


def most_flagged_on_a_path(
    nodes: np.ndarray, step: Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]], flagged: np.ndarray
) -> int:
    """The most items flagged in the boolean ``flagged`` (over item ids; items past its end
    are not flagged) on the path from one of ``nodes`` (not the root) up to the root;
    ``step(nodes)`` gives the nodes' items and parents. O(nodes x depth), vectorised."""
    rows = np.arange(nodes.size)
    found = np.zeros(nodes.size, dtype=np.int64)
    current = nodes.astype(np.int64)
    while current.size:
        items, parents = step(current)
        inside = items < flagged.size
        found[rows[inside]] += flagged[items[inside]]
        keep = parents != ROOT
        rows, current = rows[keep], parents[keep].astype(np.int64)
    return int(found.max()) if found.size else 0


def header_table(arrays: TreeArrays, n_items: int) -> HeaderTable:
    """Build the header table (item totals and node links) of a tree snapshot. O(n log n)."""
    live = np.flatnonzero(arrays.count > 0)
    live = live[live != ROOT]
    items = arrays.item[live]
    order = np.argsort(items, kind="stable")
    nodes = live[order].astype(np.int64)
    start = np.searchsorted(items[order], np.arange(n_items + 1)).astype(np.int64)
    item_count = np.bincount(items, weights=arrays.count[live], minlength=n_items)
    return HeaderTable(item_count=item_count.astype(np.int64), nodes=nodes, start=start)


def frequency_rank(item_count: Sequence[int] | np.ndarray) -> np.ndarray:
    """Rank items by descending count, ties by id: the classic FP-tree order."""
    counts = np.asarray(item_count, dtype=np.int64)
    order = np.lexsort((np.arange(len(counts)), -counts))
    rank = np.empty(len(counts), dtype=np.int64)
    rank[order] = np.arange(len(counts))
    return rank
