"""FP-growth over the prefix tree's conditional pattern bases, without candidate generation.

Han, Pei, Yin, "Mining Frequent Patterns without Candidate Generation", SIGMOD 2000. The
top-level conditional pattern base of each frequent item is read off the tree: for every
node of the item (its node links in the header table, :func:`header_table`), the path of
frequent ancestors up to the root, weighted by the node's count. Deeper bases are projected
from their parent base. Bases are held as arrays (items of all rows, row starts, row weights) and projected
with numpy, so the Python work per step is constant and the data work is vectorised.

Items are recoded by tree order (0 = nearest the root), so every row lists its items in
increasing code order and the conditional base of code ``j`` inside a base is, for every
row holding ``j``, the row's prefix before ``j``. Each itemset is therefore found exactly
once, from its item with the largest code.

Guards: before growing anything, :func:`sure_count` bounds the result from below (the
path to a node counted at least the threshold makes every subset of its frequent items
frequent), and the count of reported itemsets is checked as they are found, so a mine
over ``max_itemsets`` raises ``ResultTooLarge`` without listing them; a set ``interrupt``
stops the mine (``MiningInterrupted``) within one projection step.
"""

from __future__ import annotations

import math
import threading
from dataclasses import dataclass
from itertools import combinations

import numpy as np

from stream_miner.engine.baskets import offsets
from stream_miner.engine.limits import stop_if_set, too_many_itemsets
from stream_miner.engine.tree import ROOT, TreeArrays, header_table, most_flagged_on_a_path

Itemset = tuple[int, ...]

_ROWS_PER_BLOCK = 1 << 20
_EMITTED_PER_CHECK = 4096  # itemsets of one single path listed between two interrupt checks


@dataclass
class _Base:
    """A conditional pattern base: row ``r`` is ``codes[start[r]:start[r + 1]]``, weight ``weight[r]``."""

    codes: np.ndarray
    start: np.ndarray
    weight: np.ndarray


def mine_tree(
    tree: TreeArrays,
    min_count: int,
    *,
    max_size: int | None = None,
    allowed: np.ndarray | None = None,
    max_itemsets: int | None = None,
    interrupt: threading.Event | None = None,
) -> dict[Itemset, int]:
    """All itemsets with count >= ``min_count`` (and at most ``max_size`` items), with counts.

    ``allowed`` is an optional boolean mask over item ids; other items never appear.
    Itemsets are returned as tuples of item ids in increasing id order. More than
    ``max_itemsets`` (None: no cap) raise ``ResultTooLarge``, early; a set ``interrupt``
    raises ``MiningInterrupted``.
    """
    if min_count < 1:
        raise ValueError(f"min_count must be at least 1, got {min_count}")
    if max_size is not None and max_size < 1:
        raise ValueError(f"max_size must be at least 1, got {max_size}")
    if tree.n_baskets == 0:
        return {}
    n_items = int(tree.item.max()) + 1
    header = header_table(tree, n_items)
    item_count = header.item_count
    frequent = item_count >= min_count
    if allowed is not None:
        mask = np.zeros(n_items, dtype=bool)
        mask[: min(n_items, len(allowed))] = allowed[:n_items]
        frequent &= mask
    freq_items = np.flatnonzero(frequent)
    if freq_items.size == 0:
        return {}
    if max_itemsets is not None:
        heavy = np.flatnonzero(tree.count >= min_count)
        path_items = most_flagged_on_a_path(
            heavy[heavy != ROOT], lambda n: (tree.item[n], tree.parent[n]), frequent
        )
        check_size(freq_items.size, path_items, max_size, max_itemsets)
    rank = tree.rank[:n_items]
    by_tree_order = freq_items[np.argsort(rank[freq_items], kind="stable")]
    code_of = np.full(n_items, -1, dtype=np.int64)
    code_of[by_tree_order] = np.arange(by_tree_order.size)

    out: dict[Itemset, int] = {}
    miner = _Grower(min_count, max_size, by_tree_order, out, max_itemsets, interrupt)
    for code in range(by_tree_order.size):
        out[miner.itemset((code,))] = int(item_count[by_tree_order[code]])
    if max_size == 1:
        return out
    # the node links of the frequent items, in tree order: row block of code c = bounds[c:c+2]
    links = np.diff(header.start)[by_tree_order]
    bounds = offsets(links)
    nodes = header.nodes[np.repeat(header.start[by_tree_order] - bounds[:-1], links) + np.arange(bounds[-1])]
    first = 0
    while first < by_tree_order.size:
        last = first + 1
        while last < by_tree_order.size and bounds[last + 1] - bounds[first] <= _ROWS_PER_BLOCK:
            last += 1
        block = nodes[bounds[first] : bounds[last]]
        base = _ancestor_base(tree, block, code_of, interrupt)
        for code in range(first, last):
            rows = np.arange(bounds[code], bounds[code + 1]) - bounds[first]
            miner.grow((code,), _select_rows(base, rows))
        first = last
    return out


def check_size(n_frequent: int, path_items: int, max_size: int | None, max_itemsets: int) -> None:
    """Raise ``ResultTooLarge`` when the :func:`sure_count` is over ``max_itemsets``."""
    found = sure_count(n_frequent, path_items, max_size)
    if found > max_itemsets:
        raise too_many_itemsets(found, max_itemsets)


def sure_count(n_frequent: int, path_items: int, max_size: int | None) -> int:
    """A lower bound of the itemsets (up to ``max_size`` items) a mine reports, known before
    mining: its ``n_frequent`` frequent items, and every subset of two or more of the
    ``path_items`` frequent items on the path to one node counted at least the threshold
    (each subset lies in all of that node's baskets).

    >>> sure_count(3, 3, None), sure_count(3, 3, 2), sure_count(40, 32, None)
    (7, 6, 4294967303)
    """
    largest = path_items if max_size is None else min(path_items, max_size)
    return n_frequent + sum(math.comb(path_items, size) for size in range(2, largest + 1))


def _ancestor_base(
    tree: TreeArrays, nodes: np.ndarray, code_of: np.ndarray, interrupt: threading.Event | None
) -> _Base:
    """One row per node: the codes of its frequent ancestors, root first; weight = node count."""
    depth_rows: list[np.ndarray] = []
    depth_codes: list[np.ndarray] = []
    rows = np.arange(nodes.size)
    current = tree.parent[nodes].astype(np.int64)
    while rows.size:
        stop_if_set(interrupt)
        keep = current != ROOT
        rows, current = rows[keep], current[keep]
        codes = code_of[tree.item[current]]
        hit = codes >= 0
        depth_rows.append(rows[hit])
        depth_codes.append(codes[hit])
        current = tree.parent[current].astype(np.int64)
    start = offsets(np.bincount(np.concatenate(depth_rows), minlength=nodes.size))
    codes_out = np.empty(int(start[-1]), dtype=np.int64)
    filled = np.zeros(nodes.size, dtype=np.int64)
    for rows_k, codes_k in zip(depth_rows, depth_codes, strict=False):
        # climbing visits codes from the leaf end; fill each row from its end backwards
        codes_out[start[rows_k + 1] - 1 - filled[rows_k]] = codes_k
        filled[rows_k] += 1
    return _Base(codes=codes_out, start=start, weight=tree.count[nodes].astype(np.int64))


def _select_rows(base: _Base, rows: np.ndarray) -> _Base:
    """The sub-base made of the given (consecutive) rows."""
    lo, hi = base.start[rows[0]], base.start[rows[-1] + 1]
    return _Base(
        codes=base.codes[lo:hi],
        start=base.start[rows[0] : rows[-1] + 2] - lo,
        weight=base.weight[rows],
    )


class _Grower:
    """Depth-first FP-growth over array-held conditional pattern bases."""

    def __init__(
        self,
        min_count: int,
        max_size: int | None,
        items: np.ndarray,
        out: dict[Itemset, int],
        max_itemsets: int | None,
        interrupt: threading.Event | None,
    ) -> None:
        self.min_count = min_count
        self.max_size = max_size
        self.items = items.tolist()
        self.out = out
        self.max_itemsets = max_itemsets
        self.interrupt = interrupt

    def itemset(self, codes: tuple[int, ...]) -> Itemset:
        items = self.items
        return tuple(sorted(items[c] for c in codes))

    def grow(self, suffix: tuple[int, ...], base: _Base) -> None:
        """Emit every frequent extension of ``suffix`` found in ``base`` and recurse."""
        stack = [(suffix, base)]
        while stack:
            stop_if_set(self.interrupt)
            suffix, base = stack.pop()
            self._expand(suffix, base, stack)

    def _expand(self, suffix: tuple[int, ...], base: _Base, stack: list) -> None:
        codes, start, weight = base.codes, base.start, base.weight
        if codes.size == 0:
            return
        lengths = np.diff(start)
        row_of = np.repeat(np.arange(weight.size), lengths)
        counts = np.bincount(codes, weights=weight[row_of])
        frequent = counts >= self.min_count
        freq_codes = np.flatnonzero(frequent)
        if freq_codes.size == 0:
            return
        deeper = self.max_size is None or len(suffix) + 1 < self.max_size
        if weight.size == 1:
            self._emit_single_path(suffix, freq_codes.tolist(), int(weight[0]))
            return
        self._check_room(freq_codes.size)
        for code in freq_codes.tolist():
            self.out[self.itemset(suffix + (code,))] = int(counts[code])
        if not deeper:
            return
        keep = frequent[codes]
        codes, row_of = codes[keep], row_of[keep]
        start = offsets(np.bincount(row_of, minlength=weight.size))
        order = np.argsort(codes, kind="stable")
        bounds = np.searchsorted(codes[order], freq_codes)
        ends = np.append(bounds[1:], codes.size)
        for code, lo, hi in zip(freq_codes.tolist(), bounds.tolist(), ends.tolist(), strict=False):
            positions = order[lo:hi]
            rows = row_of[positions]
            row_start = start[rows]
            prefix = positions - row_start
            nonempty = prefix > 0
            if not nonempty.any():
                continue
            rows, row_start, prefix = rows[nonempty], row_start[nonempty], prefix[nonempty]
            new_start = offsets(prefix)
            gather = np.repeat(row_start - new_start[:-1], prefix) + np.arange(new_start[-1])
            stack.append((suffix + (code,), _Base(codes=codes[gather], start=new_start, weight=weight[rows])))

    def _emit_single_path(self, suffix: tuple[int, ...], path: list[int], count: int) -> None:
        """A base of one row: every combination of its frequent items has the row's count.
        How many that is is known before any is listed."""
        room = len(path) if self.max_size is None else min(len(path), self.max_size - len(suffix))
        self._check_room(sum(math.comb(len(path), size) for size in range(1, room + 1)))
        listed = 0
        for size in range(1, room + 1):
            for combo in combinations(path, size):
                self.out[self.itemset(suffix + combo)] = count
                listed += 1
                if listed % _EMITTED_PER_CHECK == 0:
                    stop_if_set(self.interrupt)

    def _check_room(self, more: int) -> None:
        """Raise ``ResultTooLarge`` when ``more`` new itemsets would exceed the cap."""
        if self.max_itemsets is not None and len(self.out) + more > self.max_itemsets:
            raise too_many_itemsets(len(self.out) + more, self.max_itemsets)
