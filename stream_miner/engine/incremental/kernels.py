"""Loops for the two per-basket hot paths of incremental ticks, in numpy and compiled (numba).

Both walk baskets in CSR form (``items[start[r]:start[r + 1]]`` is basket ``r``). The numpy
versions need a few passes over memory and temporary arrays; the compiled ones need one,
but numba's start (importing it and loading the cached loops: about 0.5-0.8 s and 100 MB
in a process) costs more than a short run's whole tracking. So :func:`run` uses numpy
until the numpy loops have taken ``COMPILE_AFTER`` seconds in this process, and the
compiled loops from then on (the ski-rental rule: at most about twice the better choice's
cost). Both versions give the same results.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable
from typing import Any

import numpy as np

COMPILE_AFTER = 0.5  # seconds of numpy loops, about numba's start, after which compiling pays

_compiled: dict[Callable[..., Any], Callable[..., Any]] = {}
_numpy_seconds = [0.0]
_lock = threading.Lock()


def compiled(loop: Callable[..., Any]) -> Callable[..., Any]:
    """``loop`` compiled by numba (nopython mode, GIL released), compiled once per process."""
    with _lock:
        if loop not in _compiled:
            from numba import njit  # deferred: only long incremental runs need it

            _compiled[loop] = njit(cache=True, nogil=True)(loop)
        return _compiled[loop]


def use_compiled() -> None:
    """Use the compiled loops from now on (see
    :func:`~stream_miner.engine.compiled_start.load_compiled_loops`)."""
    with _lock:
        _numpy_seconds[0] = max(_numpy_seconds[0], COMPILE_AFTER)


def run(loop: Callable[..., Any], *args: Any) -> Any:
    """``loop(*args)``: its numpy version until those have cost ``COMPILE_AFTER`` seconds in
    this process, then the compiled one."""
    if _numpy_seconds[0] >= COMPILE_AFTER:
        return compiled(loop)(*args)
    started = time.perf_counter()
    out = _IN_NUMPY[loop](*args)
    with _lock:
        _numpy_seconds[0] += time.perf_counter() - started
    return out


def add_pairs(
    items: np.ndarray,
    start: np.ndarray,
    signs: np.ndarray,
    slot_of: np.ndarray,
    only: np.ndarray,
    counts: np.ndarray,
    report_from: int,
    reported: np.ndarray,
) -> int:
    """Add ``signs[r]`` to the count of every pair of items with slots in basket ``r``
    (``counts`` is the packed triangle: the pair of slots ``s < t`` is cell
    ``t * (t - 1) // 2 + s``), skipping pairs with no item set in ``only`` (None: skip none).

    Cells whose count reached ``report_from`` are written to ``reported`` (one entry per
    update: to see them all it needs room for every pair); returns how many were written.
    """
    slots = np.empty(items.size, dtype=np.int64)
    marked = np.ones(items.size, dtype=np.bool_)
    for i in range(items.size):
        item = items[i]
        slots[i] = slot_of[item] if item < slot_of.size else -1
        if only is not None:
            marked[i] = item < only.size and only[item]
    n = 0
    for r in range(start.size - 1):
        sign = signs[r]
        for i in range(start[r], start[r + 1]):
            a = slots[i]
            if a < 0:
                continue
            for j in range(i + 1, start[r + 1]):
                b = slots[j]
                if b < 0 or not (marked[i] or marked[j]):
                    continue
                cell = b * (b - 1) // 2 + a if a < b else a * (a - 1) // 2 + b
                counts[cell] += sign
                if counts[cell] >= report_from and n < reported.size:
                    reported[n] = cell
                    n += 1
    return n


def rows_holding(items: np.ndarray, start: np.ndarray, alive: np.ndarray, wanted: np.ndarray) -> np.ndarray:
    """Indices of the live baskets holding at least one item set in ``wanted``."""
    out = np.empty(start.size - 1, dtype=np.int64)
    n = 0
    for r in range(start.size - 1):
        if not alive[r]:
            continue
        for i in range(start[r], start[r + 1]):
            if items[i] < wanted.size and wanted[items[i]]:
                out[n] = r
                n += 1
                break
    return out[:n]


def add_pairs_numpy(
    items: np.ndarray,
    start: np.ndarray,
    signs: np.ndarray,
    slot_of: np.ndarray,
    only: np.ndarray | None,
    counts: np.ndarray,
    report_from: int,
    reported: np.ndarray,
) -> int:
    """:func:`add_pairs` in numpy: the same counts; it writes each touched cell whose count
    is at least ``report_from`` after the whole batch once (all its callers look at the
    final counts of the cells written)."""
    items = items.astype(np.int64)
    inside = items < slot_of.size
    slots = np.full(items.size, -1, dtype=np.int64)
    slots[inside] = slot_of[items[inside]]
    row = np.repeat(np.arange(start.size - 1), np.diff(start))
    kept = slots >= 0
    slots, row = slots[kept], row[kept]
    if only is None:
        marked = None
    else:
        held = items[kept]
        marked = np.zeros(held.size, dtype=bool)
        within = held < only.size
        marked[within] = only[held[within]]
    lengths = np.bincount(row, minlength=start.size - 1)
    first_of_row = np.cumsum(lengths) - lengths
    after = lengths[row] - (np.arange(row.size) - first_of_row[row]) - 1  # partners later in the basket
    first = np.repeat(np.arange(row.size), after)
    second = first + np.arange(first.size) - np.repeat(np.cumsum(after) - after, after) + 1
    if marked is not None:
        chosen = marked[first] | marked[second]
        first, second = first[chosen], second[chosen]
    a, b = slots[first], slots[second]
    low, high = np.minimum(a, b), np.maximum(a, b)
    cells = high * (high - 1) // 2 + low
    np.add.at(counts, cells, signs[row[first]].astype(counts.dtype))
    if reported.size == 0 or cells.size == 0:
        return 0
    cells.sort()
    touched = cells[np.concatenate([[True], cells[1:] != cells[:-1]])]
    touched = touched[counts[touched] >= report_from][: reported.size]
    reported[: touched.size] = touched
    return int(touched.size)


def rows_holding_numpy(
    items: np.ndarray, start: np.ndarray, alive: np.ndarray, wanted: np.ndarray
) -> np.ndarray:
    """:func:`rows_holding` in numpy."""
    items = items.astype(np.int64)
    inside = items < wanted.size
    hit = np.zeros(items.size, dtype=bool)
    hit[inside] = wanted[items[inside]]
    rows = np.repeat(np.arange(start.size - 1), np.diff(start))[hit]
    return np.flatnonzero((np.bincount(rows, minlength=start.size - 1) > 0) & alive).astype(np.int64)


_IN_NUMPY: dict[Callable[..., Any], Callable[..., Any]] = {
    add_pairs: add_pairs_numpy,
    rows_holding: rows_holding_numpy,
}
