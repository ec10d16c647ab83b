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
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import combinations

import numpy as np

from stream_miner.engine.baskets import offsets
from stream_miner.engine.tree import ROOT, TreeArrays, header_table

Itemset = tuple[int, ...]

_ROWS_PER_BLOCK = 1 << 20


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
) -> dict[Itemset, int]:
    """All itemsets with count >= ``min_count`` (and at most ``max_size`` items), with counts.

    ``allowed`` is an optional boolean mask over item ids; other items never appear.
    Itemsets are returned as tuples of item ids in increasing id order.
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
    rank = tree.rank[:n_items]
    by_tree_order = freq_items[np.argsort(rank[freq_items], kind="stable")]
    code_of = np.full(n_items, -1, dtype=np.int64)
    code_of[by_tree_order] = np.arange(by_tree_order.size)

    out: dict[Itemset, int] = {}
    miner = _Grower(min_count, max_size, by_tree_order, out)
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
        base = _ancestor_base(tree, block, code_of)
        for code in range(first, last):
            rows = np.arange(bounds[code], bounds[code + 1]) - bounds[first]
            miner.grow((code,), _select_rows(base, rows))
        first = last
    return out


def _ancestor_base(tree: TreeArrays, nodes: np.ndarray, code_of: np.ndarray) -> _Base:
    """One row per node: the codes of its frequent ancestors, root first; weight = node count."""
    depth_rows: list[np.ndarray] = []
    depth_codes: list[np.ndarray] = []
    rows = np.arange(nodes.size)
    current = tree.parent[nodes].astype(np.int64)
    while rows.size:
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
        self, min_count: int, max_size: int | None, items: np.ndarray, out: dict[Itemset, int]
    ) -> None:
        self.min_count = min_count
        self.max_size = max_size
        self.items = items.tolist()
        self.out = out

    def itemset(self, codes: tuple[int, ...]) -> Itemset:
        items = self.items
        return tuple(sorted(items[c] for c in codes))

    def grow(self, suffix: tuple[int, ...], base: _Base) -> None:
        """Emit every frequent extension of ``suffix`` found in ``base`` and recurse."""
        stack = [(suffix, base)]
        while stack:
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
        """A base of one row: every combination of its frequent items has the row's count."""
        room = len(path) if self.max_size is None else min(len(path), self.max_size - len(suffix))
        for size in range(1, room + 1):
            for combo in combinations(path, size):
                self.out[self.itemset(suffix + combo)] = count
