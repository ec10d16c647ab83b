"""The antecedent/consequent splits of frequent itemsets that pass a rule filter, found with
numpy over the itemsets as arrays, and given as arrays of itemset indexes (no object per rule).

Items are numbered in name order, so an itemset (a sorted tuple of names) is a sorted row of
ids. The itemsets of each size form a level; an itemset's key is the rank of its prefix (all
but the last item) in the level below, times the number of items, plus its last item, so the
index of any subset is found by one binary search per item (the itemsets must be downward
closed). Splits are handled a block at a time, either one split pattern (which positions go
to the antecedent) over every itemset of a size, or every pattern over one itemset when the
patterns outnumber the itemsets. Thresholds are compared exactly, in integers (Python
integers where int64 could overflow).
"""

from __future__ import annotations

import sys
import threading
from collections.abc import Iterator
from dataclasses import dataclass
from fractions import Fraction
from functools import lru_cache
from itertools import chain, combinations

import numpy as np

from stream_miner.engine.limits import stop_if_set, too_many_rules

Names = tuple[str, ...]
_FITS = 1 << 62  # products below this are compared in int64


@dataclass(frozen=True)
class SplitFilter:
    """The thresholds of a rule filter, ready to check splits with."""

    min_confidence: Fraction
    min_lift: Fraction | None
    max_antecedent: int | None
    max_consequent: int | None
    antecedent_items: frozenset[str] | None
    consequent_items: frozenset[str] | None
    max_total: int | None


def passing_splits(
    keys: list[Names],
    counts: np.ndarray,
    n_baskets: int,
    f: SplitFilter,
    interrupt: threading.Event | None,
    compiled: bool | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(itemset, antecedent, consequent) of every passing split of the itemsets ``keys`` (with
    ``counts``, int64), each an index into ``keys``, in the order of the itemsets, then
    antecedent size, then antecedent positions (lexicographic). Raises ``ResultTooLarge`` past
    ``f.max_total``. ``compiled``: with the numba loop (:mod:`stream_miner.engine.rule_kernel`)
    or numpy, see :func:`_kernel_pays` (None: whichever pays)."""
    lengths = np.fromiter(map(len, keys), np.int64, len(keys))
    names = sorted([keys[i][0] for i in np.flatnonzero(lengths == 1).tolist()])
    id_of = {name: i for i, name in enumerate(names)}
    if _kernel_pays(lengths, n_baskets, f, compiled):
        return _compiled_splits(keys, lengths, counts, id_of, n_baskets, f, interrupt)
    levels = _Levels(keys, counts, id_of, len(names))
    left = _mask(f.antecedent_items, id_of, len(names))
    right = _mask(f.consequent_items, id_of, len(names))
    found: list[tuple[np.ndarray, ...]] = []
    total = 0
    for ante, cons, count, at, pattern in _blocks(levels, f):
        stop_if_set(interrupt)
        kept = _passes(ante, cons, count, n_baskets, levels, left, right, f)
        if kept is None:
            continue
        chosen, a, c = kept
        total += int(chosen.size)
        if f.max_total is not None and total > f.max_total:
            raise too_many_rules(total, f.max_total)
        found.append((at[chosen], pattern[chosen], a, c))
    if not found:
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty, empty
    at, pattern, a, c = (np.concatenate([block[j] for block in found]) for j in range(4))
    order = np.lexsort((pattern, at))
    return at[order], a[order], c[order]


def _kernel_pays(lengths: np.ndarray, n_baskets: int, f: SplitFilter, compiled: bool | None) -> bool:
    """Whether the numba loop lists the splits: only when every product fits int64 and the
    itemsets are small enough for a table of their subsets; then as ``compiled`` says, or
    (None) when numba is loaded already or the splits are many enough to repay loading it."""
    conf, lift = f.min_confidence, f.min_lift
    if n_baskets * max(conf.numerator, conf.denominator) >= _FITS:
        return False
    if lift is not None and n_baskets * n_baskets * max(lift.numerator, lift.denominator) >= _FITS:
        return False
    sizes = np.bincount(lengths)
    if sizes.size - 1 > KERNEL_LARGEST:
        return False
    if compiled is not None:
        return compiled
    return "numba" in sys.modules or sum(int(n) << size for size, n in enumerate(sizes)) >= KERNEL_SPLITS


# a numba import and cached load (0.3-0.7 s) costs about what numpy spends on this many splits
KERNEL_SPLITS = 3_000_000
KERNEL_LARGEST = 20  # a table of 2^size subset indexes per itemset
KERNEL_ITEMSETS = 8192  # itemsets per call of the loop, between polls of the interrupt


def _compiled_splits(
    keys: list[Names],
    lengths: np.ndarray,
    counts: np.ndarray,
    id_of: dict[str, int],
    n_baskets: int,
    f: SplitFilter,
    interrupt: threading.Event | None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """:func:`passing_splits` with the numba loop."""
    from stream_miner.engine.rule_kernel import DONE, GROW, TOO_MANY, split_loop, subsets_one_smaller

    start = np.zeros(len(keys) + 1, dtype=np.int64)
    np.cumsum(lengths, out=start[1:])
    items = _item_ids(keys, id_of, int(start[-1]))
    largest = int(lengths.max(initial=1))
    patterns, pattern_start = _pattern_masks(largest, f.max_antecedent, f.max_consequent)
    single = np.full(len(id_of), -1, dtype=np.int64)
    ones = np.flatnonzero(lengths == 1)
    single[items[start[ones]]] = ones
    everything = np.ones(len(id_of), dtype=bool)
    left = _mask(f.antecedent_items, id_of, len(id_of))
    right = _mask(f.consequent_items, id_of, len(id_of))
    lift = (0, 0) if f.min_lift is None else (f.min_lift.numerator, f.min_lift.denominator)
    confidence = (f.min_confidence.numerator, f.min_confidence.denominator)
    largest_consequent = largest if f.max_consequent is None else f.max_consequent
    thresholds = np.array([n_baskets, *confidence, *lift, largest_consequent], dtype=np.int64)
    cap = -1 if f.max_total is None else f.max_total
    state = np.array([0, 0, KERNEL_ITEMSETS, cap], dtype=np.int64)
    out = np.empty((3, max(1024, 2 * len(keys))), dtype=np.int64)
    drop, complete = subsets_one_smaller(items, start)
    if not complete:
        raise ValueError("the itemsets are not downward closed: a subset of one is missing")
    arrays = (items, start, counts, drop, single, patterns, pattern_start)
    sides = (everything if left is None else left, everything if right is None else right)
    while True:
        stop_if_set(interrupt)
        status = split_loop(*arrays, *sides, thresholds, state, out)
        if status == DONE:
            break
        if status == TOO_MANY:
            raise too_many_rules(int(state[1]), cap)
        if status == GROW:
            out = np.concatenate([out, np.empty((3, 3 * out.shape[1]), dtype=np.int64)], axis=1)
    row = int(state[1])
    return out[0, :row].copy(), out[1, :row].copy(), out[2, :row].copy()


def _item_ids(keys: list[Names], id_of: dict[str, int], total: int) -> np.ndarray:
    """The ids of the items of ``keys`` in a row: compiled over the names joined by zero bytes
    (a few times faster than a look-up per item), else (a name holds a zero) name by name."""
    from stream_miner.engine.rule_kernel import item_ids

    if not any("\0" in name for name in id_of):
        text = "\0".join(chain.from_iterable(keys)).encode("utf-8", "surrogatepass")
        names = "".join(id_of).encode("utf-8", "surrogatepass")
        sizes = [len(name.encode("utf-8", "surrogatepass")) for name in id_of]
        name_start = np.zeros(len(sizes) + 1, dtype=np.int64)
        np.cumsum(sizes, out=name_start[1:])
        ids = item_ids(np.frombuffer(text, np.uint8), np.frombuffer(names, np.uint8), name_start, total)
        if (ids >= 0).all():
            return ids
    return np.fromiter(map(id_of.__getitem__, chain.from_iterable(keys)), np.int64, total)


@lru_cache(maxsize=16)
def _pattern_masks(
    largest: int, max_antecedent: int | None, max_consequent: int | None
) -> tuple[np.ndarray, np.ndarray]:
    """The split patterns of every size up to ``largest`` as masks of antecedent positions, in
    output order, and where each size's start (size ``s``: ``masks[start[s]:start[s + 1]]``)."""
    masks = [np.zeros(0, dtype=np.int64)] * 2
    for size in range(2, largest + 1):
        rows = [
            row for _, ante, _ in _patterns_of(size, max_antecedent, max_consequent) for row in ante.tolist()
        ]
        masks.append(np.array([sum(1 << p for p in row) for row in rows], dtype=np.int64))
    start = np.zeros(largest + 2, dtype=np.int64)
    np.cumsum([len(m) for m in masks], out=start[1:])
    joined = np.concatenate(masks)
    joined.flags.writeable = start.flags.writeable = False
    return joined, start


class _Levels:
    """The itemsets by size: rows of item ids, counts, input indexes, and sorted keys."""

    def __init__(self, keys: list[Names], counts: np.ndarray, id_of: dict[str, int], n_items: int) -> None:
        self.n_items = n_items
        by_size: dict[int, list[int]] = {}
        for i, key in enumerate(keys):
            by_size.setdefault(len(key), []).append(i)
        self.largest = max(by_size, default=0)
        self.all_counts = all_counts = counts
        self.rows: dict[int, np.ndarray] = {}
        self.counts: dict[int, np.ndarray] = {}
        self.index: dict[int, np.ndarray] = {}
        self.sorted_keys: dict[int, np.ndarray] = {}
        self.sorted_index: dict[int, np.ndarray] = {}
        for size in range(1, self.largest + 1):
            where = np.array(by_size.get(size, []), dtype=np.int64)
            flat = chain.from_iterable(map(keys.__getitem__, where.tolist()))
            rows = np.fromiter(map(id_of.__getitem__, flat), np.int64, len(where) * size).reshape(-1, size)
            self.rows[size], self.counts[size], self.index[size] = rows, all_counts[where], where
            level_keys = self._key(rows)
            order = np.argsort(level_keys, kind="stable")
            self.sorted_keys[size], self.sorted_index[size] = level_keys[order], where[order]

    def _key(self, rows: np.ndarray) -> np.ndarray:
        key = rows[:, 0].copy()
        for j in range(1, rows.shape[1]):
            rank = np.searchsorted(self.sorted_keys[j], key) if j > 1 else key
            key = rank * self.n_items + rows[:, j]
        return key

    def index_of(self, rows: np.ndarray) -> np.ndarray:
        """The input indexes of the itemsets (rows of sorted item ids, all of one size)."""
        size = rows.shape[1]
        return self.sorted_index[size][np.searchsorted(self.sorted_keys[size], self._key(rows))]


def _mask(items: frozenset[str] | None, id_of: dict[str, int], n_items: int) -> np.ndarray | None:
    if items is None:
        return None
    mask = np.zeros(n_items, dtype=bool)
    mask[[id_of[name] for name in items if name in id_of]] = True
    return mask


def _patterns(size: int, f: SplitFilter) -> list[tuple[int, np.ndarray, np.ndarray]]:
    """The split patterns of an itemset of ``size`` by antecedent size: (index of the first,
    antecedent positions, consequent positions), one row per pattern, lexicographically."""
    return _patterns_of(size, f.max_antecedent, f.max_consequent)


@lru_cache(maxsize=64)
def _patterns_of(
    size: int, max_antecedent: int | None, max_consequent: int | None
) -> list[tuple[int, np.ndarray, np.ndarray]]:
    largest = size - 1 if max_antecedent is None else min(size - 1, max_antecedent)
    out = []
    first = 0
    for k in range(1, largest + 1):
        if max_consequent is not None and size - k > max_consequent:
            continue
        ante = np.array(list(combinations(range(size), k)), dtype=np.int64).reshape(-1, k)
        cons = np.array(
            [[p for p in range(size) if p not in row] for row in ante.tolist()], dtype=np.int64
        ).reshape(len(ante), size - k)
        out.append((first, ante, cons))
        first += len(ante)
    return out


Block = tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]


def _blocks(levels: _Levels, f: SplitFilter) -> Iterator[Block]:
    """Splits a block at a time: (antecedents, consequents, itemset counts, itemset indexes,
    pattern indexes), one row per split, every antecedent of a block of one size."""
    for size in range(2, levels.largest + 1):
        rows, counts, where = levels.rows[size], levels.counts[size], levels.index[size]
        patterns = _patterns(size, f)
        n_patterns = sum(len(ante) for _, ante, _ in patterns)
        if n_patterns <= len(where):  # one pattern over every itemset of this size
            for first, ante, cons in patterns:
                for p in range(len(ante)):
                    yield rows[:, ante[p]], rows[:, cons[p]], counts, where, np.full(len(where), first + p)
        else:  # every pattern over one itemset
            for r in range(len(where)):
                for first, ante, cons in patterns:
                    n = len(ante)
                    yield (
                        rows[r][ante],
                        rows[r][cons],
                        np.full(n, counts[r]),
                        np.full(n, where[r]),
                        first + np.arange(n),
                    )


def _passes(
    ante: np.ndarray,
    cons: np.ndarray,
    count: np.ndarray,
    n_baskets: int,
    levels: _Levels,
    left: np.ndarray | None,
    right: np.ndarray | None,
    f: SplitFilter,
) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """The rows of a block that pass, with the input indexes of their antecedents and consequents."""
    chosen = np.arange(len(count))
    if left is not None:
        chosen = chosen[left[ante].all(axis=1)]
    if right is not None:
        chosen = chosen[right[cons[chosen]].all(axis=1)]
    if chosen.size == 0:
        return None
    a_at = levels.index_of(ante[chosen])
    n_a = levels.all_counts[a_at]
    conf = f.min_confidence
    big = n_baskets * max(conf.numerator, conf.denominator) >= _FITS
    c, a = (x.astype(object) if big else x for x in (count[chosen], n_a))
    ok = c * conf.denominator >= conf.numerator * a
    chosen, a_at, n_a = chosen[ok], a_at[ok], n_a[ok]
    if chosen.size == 0:
        return None
    c_at = levels.index_of(cons[chosen])
    lift = f.min_lift
    if lift is not None:
        n_c = levels.all_counts[c_at]
        big = n_baskets * n_baskets * max(lift.numerator, lift.denominator) >= _FITS
        c, a, b = (x.astype(object) if big else x for x in (count[chosen], n_a, n_c))
        ok = c * n_baskets * lift.denominator >= lift.numerator * a * b
        chosen, a_at, c_at = chosen[ok], a_at[ok], c_at[ok]
        if chosen.size == 0:
            return None
    return chosen, a_at, c_at
