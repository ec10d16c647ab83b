"""FP-growth over array-held conditional pattern bases, projected with numpy: the path for
small mines, which need no compiled code (and so no numba import).

A base holds its rows as arrays (codes of all rows, row starts, row weights); every
projection step is a constant amount of Python work over vectorised data work. The top
codes are grown one at a time, in increasing order; the itemsets of one top code are kept
apart until it is complete, so that when the work budget is spent the mine hands over at a
top code's start and the compiled loop (:mod:`stream_miner.engine.growth_kernel`), which
finds the same itemsets in the same order, goes on from there.
"""

from __future__ import annotations

import math
import threading
from collections.abc import Sequence
from dataclasses import dataclass
from itertools import combinations
from typing import Generic, TypeVar

import numpy as np

from stream_miner.engine.baskets import offsets
from stream_miner.engine.limits import stop_if_set, too_many_itemsets
from stream_miner.engine.tree import ROOT, TreeArrays

L = TypeVar("L", int, str)  # an item label: its id or its name

_ROWS_PER_BLOCK = 1 << 20
_LISTED_PER_STEP = 64  # itemsets of a single path listed per step of work (and interrupt check)


@dataclass
class _Base:
    """A conditional pattern base: row ``r`` is ``codes[start[r]:start[r + 1]]``, weight ``weight[r]``."""

    codes: np.ndarray
    start: np.ndarray
    weight: np.ndarray


class _OverBudget(Exception):
    """The work budget is spent: the top code being grown goes to the compiled loop."""


def grow_in_numpy(
    tree: TreeArrays,
    code_of: np.ndarray,
    nodes: np.ndarray,
    bounds: np.ndarray,
    labels: Sequence[L],
    out: dict[tuple[L, ...], int],
    *,
    min_count: int,
    max_size: int | None,
    max_itemsets: int | None,
    interrupt: threading.Event | None,
    budget: int,
) -> tuple[int, int]:
    """Add to ``out`` the itemsets of two or more items of each top code in turn (the nodes
    of code ``c`` are ``nodes[bounds[c]:bounds[c + 1]]``; its item's label ``labels[c]``, an
    itemset is the sorted tuple of its labels), until about ``budget`` steps of work are
    spent; return the first top code not grown (every code: ``len(labels)``) and the steps spent."""
    grower = _Grower(min_count, max_size, labels, out, max_itemsets, interrupt, budget)
    first = 0
    while first < len(labels):
        last = first + 1
        while last < len(labels) and bounds[last + 1] - bounds[first] <= _ROWS_PER_BLOCK:
            last += 1
        base = _ancestor_base(tree, nodes[bounds[first] : bounds[last]], code_of, interrupt)
        for code in range(first, last):
            rows = np.arange(bounds[code], bounds[code + 1]) - bounds[first]
            try:
                grower.grow((code,), _select_rows(base, rows))
            except _OverBudget:
                return code, budget - grower.budget
        first = last
    return len(labels), budget - grower.budget


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


class _Grower(Generic[L]):
    """Depth-first FP-growth over array-held conditional pattern bases, one top code at a time."""

    def __init__(
        self,
        min_count: int,
        max_size: int | None,
        labels: Sequence[L],
        out: dict[tuple[L, ...], int],
        max_itemsets: int | None,
        interrupt: threading.Event | None,
        budget: int,
    ) -> None:
        self.min_count = min_count
        self.max_size = max_size
        self.labels: Sequence[L] = labels
        self.out: dict[tuple[L, ...], int] = out
        self.pending: dict[tuple[L, ...], int] = {}
        self.max_itemsets = max_itemsets
        self.interrupt = interrupt
        self.budget = budget

    def itemset(self, codes: tuple[int, ...]) -> tuple[L, ...]:
        labels = self.labels
        return tuple(sorted(labels[c] for c in codes))

    def grow(self, suffix: tuple[int, ...], base: _Base) -> None:
        """Add every frequent extension of ``suffix`` found in ``base`` to the output, all or
        none (``_OverBudget``)."""
        self.pending = {}
        stack = [(suffix, base)]
        while stack:
            stop_if_set(self.interrupt)
            self._spend(1)
            suffix, base = stack.pop()
            self._expand(suffix, base, stack)
        self.out.update(self.pending)

    def _spend(self, steps: int) -> None:
        self.budget -= steps
        if self.budget < 0:
            raise _OverBudget

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
            self.pending[self.itemset(suffix + (code,))] = int(counts[code])
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
        more = sum(math.comb(len(path), size) for size in range(1, room + 1))
        self._check_room(more)
        self._spend(more // _LISTED_PER_STEP)
        listed = 0
        for size in range(1, room + 1):
            for combo in combinations(path, size):
                self.pending[self.itemset(suffix + combo)] = count
                listed += 1
                if listed % _LISTED_PER_STEP == 0:
                    stop_if_set(self.interrupt)

    def _check_room(self, more: int) -> None:
        """Raise ``ResultTooLarge`` when ``more`` new itemsets would exceed the cap."""
        found = len(self.out) + len(self.pending) + more
        if self.max_itemsets is not None and found > self.max_itemsets:
            raise too_many_itemsets(found, self.max_itemsets)
