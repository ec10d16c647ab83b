"""Compiled loops (numba) for the two per-basket hot paths of incremental ticks.

Both walk baskets in CSR form (``items[start[r]:start[r + 1]]`` is basket ``r``): a numpy
version needs one pass over memory per step and many temporary arrays, these need one.
numba is imported, and each loop compiled, on first use (about 70 MB of memory and 0.3 s
that a full mine never pays); compiled code is cached on disk next to the package (or in
numba's user cache).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

_compiled: dict[Callable[..., Any], Callable[..., Any]] = {}


def compiled(loop: Callable[..., Any]) -> Callable[..., Any]:
    """``loop`` compiled by numba (nopython mode, GIL released), compiled once per process."""
    if loop not in _compiled:
        from numba import njit  # deferred: only incremental ticks need it

        _compiled[loop] = njit(cache=True, nogil=True)(loop)
    return _compiled[loop]


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
