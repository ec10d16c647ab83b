"""FP-growth over the prefix tree's conditional pattern bases, without candidate generation.

Han, Pei, Yin, "Mining Frequent Patterns without Candidate Generation", SIGMOD 2000. The
top-level conditional pattern base of each frequent item is read off the tree: for every
node of the item (its node links in the header table, :func:`header_table`), the path of
frequent ancestors up to the root, weighted by the node's count. Deeper bases are projected
from their parent base. Bases are held as arrays (items of all rows, row starts, row weights).
Small mines project them with numpy (:mod:`stream_miner.engine.growth_numpy`, no compiled
code to load); once a mine has spent ``NUMPY_BUDGET`` steps there, the compiled loop
(:mod:`stream_miner.engine.growth_kernel`) grows the remaining top codes, with the same
itemsets in the same order, and once the process's mines have spent that many together, the
loop does every later mine from its start (so the loop loads between polls of ``interrupt``).

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

import gc
import math
import threading
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from types import ModuleType
from typing import Generic

import numpy as np

from stream_miner.engine.baskets import offsets
from stream_miner.engine.growth_numpy import L, grow_in_numpy
from stream_miner.engine.limits import stop_if_set, too_many_itemsets
from stream_miner.engine.tree import ROOT, TreeArrays, header_table, most_flagged_on_a_path

Itemset = tuple[int, ...]


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
    return _mine(tree, min_count, None, max_size, allowed, max_itemsets, interrupt)


def mine_tree_named(
    tree: TreeArrays,
    min_count: int,
    names: Sequence[str],
    *,
    max_size: int | None = None,
    allowed: np.ndarray | None = None,
    max_itemsets: int | None = None,
    interrupt: threading.Event | None = None,
) -> dict[tuple[str, ...], int]:
    """:func:`mine_tree`, with each itemset as the sorted tuple of its items' ``names``
    (``names[i]`` is item ``i``'s, all distinct), in the same order; named as it is listed."""
    return _mine(tree, min_count, names, max_size, allowed, max_itemsets, interrupt)


def _mine(
    tree: TreeArrays,
    min_count: int,
    names: Sequence[L] | None,
    max_size: int | None,
    allowed: np.ndarray | None,
    max_itemsets: int | None,
    interrupt: threading.Event | None,
) -> dict[tuple[L, ...], int]:
    """The mine of :func:`mine_tree`; itemsets of item ids (``names`` None) or of their names."""
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
    labels = Labels(by_tree_order, names)

    out: dict[tuple[L, ...], int] = {}
    for code, label in enumerate(labels.of_code):
        out[(label,)] = int(item_count[by_tree_order[code]])
    if max_size == 1:
        return out
    # the node links of the frequent items, in tree order: nodes of code c = nodes[bounds[c]:bounds[c+1]]
    links = np.diff(header.start)[by_tree_order]
    bounds = offsets(links)
    nodes = header.nodes[np.repeat(header.start[by_tree_order] - bounds[:-1], links) + np.arange(bounds[-1])]
    start = 0
    if _Growth.numpy_steps < NUMPY_BUDGET and not _Growth.loaded:
        start, spent = grow_in_numpy(
            tree,
            code_of,
            nodes,
            bounds,
            labels.of_code,
            out,
            min_count=min_count,
            max_size=max_size,
            max_itemsets=max_itemsets,
            interrupt=interrupt,
            budget=NUMPY_BUDGET,
        )
        _Growth.numpy_steps += spent
    if start == by_tree_order.size:
        return out
    grown = _Growth(tree, code_of, nodes, bounds, labels.key_of_code)
    keys, starts, counts = grown.run(min_count, max_size, max_itemsets, len(out), start, interrupt)
    with _no_collection():
        out.update(zip(labels.itemsets(keys, starts), counts, strict=True))
    return out


def use_compiled_loop() -> None:
    """Let the compiled loop do every mine from now on (see
    :func:`~stream_miner.engine.compiled_start.load_compiled_loops`)."""
    _Growth.numpy_steps = max(_Growth.numpy_steps, NUMPY_BUDGET)


@contextmanager
def _no_collection() -> Iterator[None]:
    """Python's cycle collector paused: building many tuples (which hold no cycles) would
    otherwise set off collections that walk every live object, a tenth of a dense mine."""
    enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if enabled:
            gc.enable()


class Labels(Generic[L]):
    """The labels of the frequent items, by code (``of_code``), and the sort keys the compiled
    loop orders an itemset's items by (``key_of_code``): the item ids, or the ranks of the
    names, so that its itemsets come out sorted and are labelled with one lookup per item."""

    def __init__(self, by_tree_order: np.ndarray, names: Sequence[L] | None) -> None:
        if names is None:
            self.of_code: list[L] = by_tree_order.tolist()
            self.key_of_code = by_tree_order
            self._of_key: np.ndarray | None = None
            return
        self.of_code = [names[i] for i in by_tree_order.tolist()]
        order = sorted(range(len(self.of_code)), key=self.of_code.__getitem__)
        self.key_of_code = np.empty(len(order), dtype=np.int64)
        self.key_of_code[order] = np.arange(len(order))
        self._of_key = np.array([self.of_code[c] for c in order], dtype=object)

    def itemsets(self, keys: np.ndarray, starts: np.ndarray) -> list[tuple[L, ...]]:
        """Itemset ``i`` (items with sort keys ``keys[starts[i]:starts[i + 1]]``) as a tuple of
        labels, for every ``i``: built a size at a time, from a column of labels per position."""
        flat = keys if self._of_key is None else self._of_key[keys]
        sizes = np.diff(starts)
        found = np.empty(sizes.size, dtype=object)
        for size in np.unique(sizes).tolist():
            which = np.flatnonzero(sizes == size)
            first = starts[which]
            columns = [flat[first + j].tolist() for j in range(size)]
            found[which] = np.fromiter(zip(*columns, strict=True), dtype=object, count=which.size)
        return found.tolist()


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


# steps of the numpy path (projections, or 64 itemsets of a single path; 40-90 us each) a mine, or
# the process's mines together, spend before the compiled loop takes over: about what importing
# numba and loading the loop costs (0.75 s), so mines never take more than about twice their best.
# Once the loop is loaded, it does every mine.
NUMPY_BUDGET = 10_000
_WORK_PER_STEP = 1 << 20  # codes handled by the compiled loop between two interrupt checks
# the arrays the compiled loop works in, in its argument order, by the group it enlarges together
_ARENAS = (
    ("a_codes", "codes"),
    ("r_start", "rows"),
    ("r_len", "rows"),
    ("r_weight", "rows"),
    ("r_mult", "rows"),
    ("o_row", "codes"),
    ("o_pos", "codes"),
    ("f_info", "frames"),
    ("fc_code", "frequent"),
    ("fc_olo", "frequent"),
    ("fc_ohi", "frequent"),
    ("table", "table"),
)


_OUT = ("out_items", "out_start", "out_count")
# first size of each group of arrays: per tree node (per frequent item for "frequent"), plus a constant
_FIRST_SIZES = {"codes": (4, 1024), "rows": (2, 1024), "frequent": (4, 64), "out": (0, 1 << 16)}


class _Growth:
    """One run of the compiled FP-growth loop (:mod:`stream_miner.engine.growth_kernel`)
    over the tree's conditional pattern bases, with the arrays it works in, enlarged when
    it asks."""

    loaded = False  # the loop has run in this process: its start is paid
    numpy_steps = 0  # steps the process has spent in the numpy path

    def __init__(
        self, tree: TreeArrays, code_of: np.ndarray, nodes: np.ndarray, bounds: np.ndarray, items: np.ndarray
    ) -> None:
        from stream_miner.engine import growth_bits, growth_kernel  # deferred: numba is slow to import

        self.kernel: ModuleType = growth_kernel
        n_codes = items.size
        whole = lambda a: np.ascontiguousarray(a, dtype=np.int64)  # noqa: E731  one compiled signature
        self.tree = (whole(tree.parent), whole(tree.count), whole(tree.item), whole(code_of))
        self.links = (whole(nodes), whole(bounds), whole(items))
        first = _FIRST_SIZES
        sizes = {
            group: per * (nodes.size if group != "frequent" else n_codes) + fixed
            for group, (per, fixed) in first.items()
            if group != "out"
        }
        sizes["table"] = 2 * sizes["rows"]
        frames = (n_codes + 1, growth_kernel.FRAME_COLUMNS)
        self.arenas = {
            name: np.zeros(frames if group == "frames" else sizes[group], dtype=np.int64)
            for name, group in _ARENAS
        }
        self.scratch = tuple(np.zeros(n_codes + 2, dtype=np.int64) for _ in range(5))
        bits = growth_bits.BITS
        self.bits = (
            np.zeros((3, growth_bits.ROWS), dtype=np.int64),
            np.zeros((bits + 2, growth_bits.S_COLUMNS), dtype=np.int64),
            np.zeros(growth_bits.SCRATCH_SHAPE, dtype=np.int64),
            np.full(1 << bits, -1, dtype=np.int64),
        )
        out = first["out"][1]
        self.out = {name: np.zeros(out * (4 if name == "out_items" else 1), np.int64) for name in _OUT}

    def run(
        self,
        min_count: int,
        max_size: int | None,
        max_itemsets: int | None,
        emitted_before: int,
        first_code: int,
        interrupt: threading.Event | None,
    ) -> tuple[np.ndarray, np.ndarray, list[int]]:
        """Every itemset of two or more items whose largest code is ``first_code`` or more:
        their sorted item ids, end to end, where each one starts (and the end), and their
        counts, in the order found."""
        kernel = self.kernel
        reg = np.zeros(kernel.N_REGISTERS, dtype=np.int64)
        reg[kernel.NEXT_TOP] = first_code
        cap = -1 if max_itemsets is None else max_itemsets
        while True:
            stop_if_set(interrupt)
            status = kernel.grow(
                *self.tree,
                *self.links,
                min_count,
                max_size or 0,
                cap,
                emitted_before,
                _WORK_PER_STEP,
                reg,
                *self.arenas.values(),
                *self.scratch,
                *self.bits,
                *self.out.values(),
            )
            if status == kernel.DONE:
                break
            if status == kernel.TOO_MANY:
                assert max_itemsets is not None
                found = int(reg[kernel.FOUND])
                if found < 0:  # a single path too long to count in 64 bits
                    n, room = int(reg[kernel.NEED_WHAT]), int(reg[kernel.NEED_SIZE])
                    more = sum(math.comb(n, size) for size in range(1, room + 1))
                    found = emitted_before + int(reg[kernel.N_OUT]) + more
                raise too_many_itemsets(found, max_itemsets)
            if status == kernel.GROW:
                self._enlarge(int(reg[kernel.NEED_WHAT]), int(reg[kernel.NEED_SIZE]))
        _Growth.loaded = True
        n = int(reg[kernel.N_OUT])
        return (
            self.out["out_items"][: reg[kernel.I_TOP]],
            self.out["out_start"][: n + 1],
            self.out["out_count"][:n].tolist(),
        )

    def _enlarge(self, what: int, need: int) -> None:
        """Make the arrays of group ``what`` (a kernel constant) hold at least ``need``."""
        kernel = self.kernel
        group = {
            kernel.CODES: "codes",
            kernel.ROWS: "rows",
            kernel.FRAMES: "frames",
            kernel.FREQUENT: "frequent",
            kernel.TABLE: "table",
        }
        if what in group:
            names = [name for name, g in _ARENAS if g == group[what]]
            arrays = self.arenas
        else:
            names = ["out_items"] if what == kernel.OUT_ITEMS else ["out_start", "out_count"]
            arrays = self.out
        for name in names:
            old = arrays[name]
            new = np.zeros((max(need, 2 * len(old)), *old.shape[1:]), dtype=old.dtype)
            new[: len(old)] = old
            arrays[name] = new
