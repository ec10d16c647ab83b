"""The compiled (numba) loop over the splits of frequent itemsets: the same passing splits, in
the same order, as :mod:`stream_miner.engine.rule_splits`, without a numpy call per block.

Imported only for large rule sets or once numba is loaded (numba costs about 0.3 s to import);
compiled code is cached on disk. Itemsets are rows of item ids in name order (CSR: ``items``,
``start``). A hash table over the rows gives each itemset's subsets one item smaller; from
them the index of a subset of an itemset (a bit mask of its positions) is found when needed:
the antecedents from the larger down while they stay confident, a passing rule's consequent
through the masks above it. The split patterns of size ``s`` are the masks
``patterns[pattern_start[s]:pattern_start[s + 1]]``, in output order (antecedent size, then
positions), for every size up to the largest itemset's. Thresholds are compared in int64:
the caller uses this loop only when no product can overflow. The loop is resumable: it stops
after a number of itemsets (the caller polls its interrupt), when the output may overflow
(the caller enlarges it) or past the cap of rules.
"""

from __future__ import annotations

import numpy as np
from numba import njit

DONE, PAUSED, GROW, TOO_MANY = 0, 1, 2, 3
_MULTIPLIER = np.uint64(0x100000001B3)
_OFFSET = np.uint64(0xCBF29CE484222325)


@njit(cache=True, nogil=True)
def _hash(items: np.ndarray, lo: int, hi: int, skip: int) -> np.uint64:
    h = _OFFSET
    for p in range(lo, hi):
        if p != skip:
            h = (h ^ np.uint64(items[p])) * _MULTIPLIER
    return h


@njit(cache=True, nogil=True)
def _bytes_hash(text: np.ndarray, lo: int, hi: int) -> np.uint64:
    h = _OFFSET
    for p in range(lo, hi):
        h = (h ^ np.uint64(text[p])) * _MULTIPLIER
    return h


@njit(cache=True, nogil=True)
def item_ids(text: np.ndarray, names: np.ndarray, name_start: np.ndarray, total: int) -> np.ndarray:
    """The ids of the ``total`` names in ``text`` (bytes, the names split by zero bytes), id ``i``
    being the name ``names[name_start[i]:name_start[i + 1]]``; -1 for a name not among them."""
    n = name_start.size - 1
    size = 1
    while size < 2 * n:
        size *= 2
    mask = np.uint64(size - 1)
    table = np.full(size, -1, dtype=np.int64)
    for i in range(n):
        slot = _bytes_hash(names, name_start[i], name_start[i + 1]) & mask
        while table[slot] != -1:
            slot = (slot + np.uint64(1)) & mask
        table[slot] = i
    ids = np.full(total, -1, dtype=np.int64)
    lo = 0
    for t in range(total):
        hi = lo
        while hi < text.size and text[hi] != 0:
            hi += 1
        slot = _bytes_hash(text, lo, hi) & mask
        while table[slot] != -1:
            i = table[slot]
            a, b = name_start[i], name_start[i + 1]
            if b - a == hi - lo:
                same = True
                for q in range(hi - lo):
                    if names[a + q] != text[lo + q]:
                        same = False
                        break
                if same:
                    ids[t] = i
                    break
            slot = (slot + np.uint64(1)) & mask
        lo = hi + 1
    return ids


@njit(cache=True, nogil=True)
def subsets_one_smaller(items: np.ndarray, start: np.ndarray) -> tuple[np.ndarray, bool]:
    """``drop[start[x] + j]``: the index of itemset ``x`` without its item ``j`` (-1 for a
    single item), and whether every such subset is an itemset (downward closed)."""
    n = start.size - 1
    size = 1
    while size < 2 * n:
        size *= 2
    mask = np.uint64(size - 1)
    table = np.full(size, -1, dtype=np.int64)
    for x in range(n):
        slot = _hash(items, start[x], start[x + 1], -1) & mask
        while table[slot] != -1:
            slot = (slot + np.uint64(1)) & mask
        table[slot] = x
    drop = np.full(items.size, -1, dtype=np.int64)
    complete = True
    for x in range(n):
        lo, hi = start[x], start[x + 1]
        if hi - lo < 2:
            continue
        for j in range(lo, hi):
            slot = _hash(items, lo, hi, j) & mask
            while True:
                y = table[slot]
                if y == -1:
                    complete = False
                    break
                if start[y + 1] - start[y] == hi - lo - 1:
                    q = start[y]
                    same = True
                    for p in range(lo, hi):
                        if p != j:
                            if items[q] != items[p]:
                                same = False
                                break
                            q += 1
                    if same:
                        drop[j] = y
                        break
                slot = (slot + np.uint64(1)) & mask
    return drop, complete


@njit(cache=True, nogil=True)
def _below(mask: int, p: int) -> int:
    """The number of positions of ``mask`` below position ``p``."""
    rest, count = mask & ((1 << p) - 1), 0
    while rest:
        rest &= rest - 1
        count += 1
    return count


@njit(cache=True, nogil=True)
def _position(bit: int) -> int:
    p = 0
    while bit > 1:
        bit >>= 1
        p += 1
    return p


@njit(cache=True, nogil=True)
def split_loop(
    items: np.ndarray,
    start: np.ndarray,
    counts: np.ndarray,
    drop: np.ndarray,
    single: np.ndarray,
    patterns: np.ndarray,
    pattern_start: np.ndarray,
    left: np.ndarray,
    right: np.ndarray,
    thresholds: np.ndarray,
    state: np.ndarray,
    out: np.ndarray,
) -> int:
    """Write (itemset, antecedent, consequent) columns into ``out`` (3 rows) from itemset
    ``state[0]`` at column ``state[1]``, at most ``state[2]`` itemsets a call; past ``state[3]``
    rules (-1: no cap) stop with TOO_MANY. ``thresholds``: window size, confidence numerator
    and denominator, lift numerator and denominator (0, 0: no lift), largest consequent.
    ``left``/``right``: the items allowed per side; ``single``: each item's itemset.

    Confident antecedents are found consequent size by consequent size (a smaller antecedent
    has a count at least as large, so it is confident only if every one-larger antecedent is);
    the rest of each itemset's patterns is skipped without a look-up."""
    n, conf_num, conf_den, lift_num, lift_den, largest_consequent = thresholds
    x, row, cap = state[0], state[1], state[3]
    stop = min(start.size - 1, x + state[2])
    masks = 1 << (pattern_start.size - 2)
    index = np.full(masks, -1, dtype=np.int64)
    confident = np.zeros(masks, dtype=np.bool_)
    queue = np.empty(masks, dtype=np.int64)
    path = np.empty(pattern_start.size, dtype=np.int64)
    while x < stop:
        lo, s = start[x], start[x + 1] - start[x]
        first, last = pattern_start[s], pattern_start[s + 1]
        if s < 2 or first == last:
            x += 1
            continue
        if row + last - first > out.shape[1]:
            state[0], state[1] = x, row
            return GROW
        full = (1 << s) - 1
        index[full] = x
        k = counts[x]
        tail = 0
        for p in range(s):  # consequents of one item
            m = full ^ (1 << p)
            a = drop[lo + p]
            index[m] = a
            if k * conf_den >= conf_num * counts[a]:
                confident[m] = True
                queue[tail] = m
                tail += 1
        head = 0
        while head < tail:  # a consequent one larger: add a position above the largest
            m = queue[head]
            head += 1
            c = full ^ m
            if _below(c, s) >= largest_consequent:
                continue
            for p in range(_position(c) + 1, s):
                smaller = m ^ (1 << p)
                if smaller == 0:
                    continue
                rest, every = c, True
                while rest:
                    q = rest & -rest
                    rest ^= q
                    if not confident[smaller | q]:
                        every = False
                        break
                if not every:
                    continue
                a = drop[start[index[m]] + _below(m, p)]
                index[smaller] = a
                if k * conf_den >= conf_num * counts[a]:
                    confident[smaller] = True
                    queue[tail] = smaller
                    tail += 1
        if tail == 0:
            index[: full + 1] = -1
            x += 1
            continue
        lefts, rights = 0, 0
        for p in range(s):
            if left[items[lo + p]]:
                lefts |= 1 << p
            if right[items[lo + p]]:
                rights |= 1 << p
        for t in range(first, last):
            m = patterns[t]
            if not confident[m] or m & ~lefts or (full ^ m) & ~rights:
                continue
            a = index[m]
            c = index[full ^ m]
            if c < 0:  # up from the consequent (adding its lowest missing position), then down
                cur, depth = full ^ m, 0
                while index[cur] < 0:
                    if cur & (cur - 1) == 0:
                        index[cur] = single[items[lo + _position(cur)]]
                        break
                    path[depth] = cur
                    depth += 1
                    missing = ~cur & full
                    cur |= missing & -missing
                while depth > 0:
                    depth -= 1
                    sub = path[depth]
                    index[sub] = drop[start[index[cur]] + _below(cur, _position(cur ^ sub))]
                    cur = sub
                c = index[full ^ m]
            if lift_den != 0 and k * n * lift_den < lift_num * counts[a] * counts[c]:
                continue
            out[0, row], out[1, row], out[2, row] = x, a, c
            row += 1
        index[: full + 1] = -1
        confident[: full + 1] = False
        x += 1
        if cap >= 0 and row > cap:
            state[0], state[1] = x, row
            return TOO_MANY
    state[0], state[1] = x, row
    return DONE if x == start.size - 1 else PAUSED
