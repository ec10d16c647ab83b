"""The compiled loop's finish for small conditional bases: rows as bit masks.

When a base the loop (:mod:`stream_miner.engine.growth_kernel`) opens has at most ``BITS``
frequent codes, its whole subtree has fewer than ``2 ** BITS`` itemsets, so it is grown in
one go: each row becomes a mask of its frequent codes (bit ``b`` = the ``b``-th of them,
in code order), equal rows are merged through a table indexed by mask, and the child of
bit ``f`` is, for each row holding ``f``, the row's bits below ``f``. Every step mirrors
the loop's (the same counts, the same single-path test on the number of merged rows, the
same listing of a single path's combinations), so the itemsets come out in the loop's order.
Numba's disk cache of the loop does not notice edits to this module: after one, clear the
cache (``__pycache__``) or touch ``growth_kernel.py``.
"""

from __future__ import annotations

from numba import njit

BITS = 16
# columns of a frame of the small stack
S_LO, S_HI, S_NEXT, S_SET, S_DEPTH, S_FREQ = range(6)
S_COLUMNS = 6
# rows of the small scratch array
K_KEY, K_COUNT, K_BIT, K_POS, K_PICKED = range(5)
SCRATCH_SHAPE = (5, 2 * BITS + 2)


# rows of the mask arena: the first base's merged rows, and as many for every level below
ROWS = (BITS + 2) << BITS


@njit(cache=True, nogil=True)
def _merge(masks, weights, mults, lo, hi, slot):
    """Fold equal masks of rows ``lo..hi`` together (weights and multiplicities added); return
    the new end. ``slot`` (indexed by mask) is all -1 before and after."""
    end = lo
    for r in range(lo, hi):
        m = masks[r]
        q = slot[m]
        if q >= 0:
            weights[q] += weights[r]
            mults[q] += mults[r]
        else:
            slot[m] = end
            masks[end], weights[end], mults[end] = m, weights[r], mults[r]
            end += 1
    for r in range(lo, end):
        slot[masks[r]] = -1
    return end


@njit(cache=True, nogil=True)
def _emit(buf, n_suffix, key, picked, n_picked, extra, count, out_items, out_start, out_count, n_out, i_top):
    """Write the itemset of the suffix ``buf[:n_suffix]`` and the bits ``picked[:n_picked]``
    (their keys sorted) with its count; return the new ``i_top``."""
    for j in range(n_picked):
        x = key[picked[j]]
        k = j
        while k > 0 and extra[k - 1] > x:
            extra[k] = extra[k - 1]
            k -= 1
        extra[k] = x
    out_start[n_out] = i_top
    out_count[n_out] = count
    return write_itemset(buf, n_suffix, extra, n_picked, out_items, i_top)


@njit(cache=True, nogil=True)
def write_itemset(buf, n, extra, extra_n, out_items, at):
    """Merge the sorted ``buf[:n]`` with the sorted ``extra[:extra_n]`` into ``out_items[at:]``;
    return the end."""
    i = 0
    j = 0
    while i < n or j < extra_n:
        if j >= extra_n or (i < n and buf[i] < extra[j]):
            out_items[at] = buf[i]
            i += 1
        else:
            out_items[at] = extra[j]
            j += 1
        at += 1
    return at


@njit(cache=True, nogil=True)
def grow_bits(
    masks,
    weights,
    mults,
    n_rows,
    n_bits,
    frequent,
    depth,
    min_count,
    max_size,
    buf,
    n_suffix,
    frames,
    scratch,
    slot,
    extra,
    out_items,
    out_start,
    out_count,
    n_out,
    i_top,
):
    """Emit every itemset below the opened base held in ``masks[:n_rows]`` (merged, bits of the
    ``frequent`` mask only; its own itemsets already emitted), whose suffix (``depth`` codes,
    keys sorted in ``buf[:n_suffix]``) ends in the base's code; the key of bit ``b`` is
    ``scratch[K_KEY, b]``. Returns ``(n_out, i_top, work)``. The output must have room for
    ``2 ** n_bits`` itemsets of ``depth + n_bits + 1`` items."""
    key = scratch[K_KEY]
    cnt = scratch[K_COUNT]
    bits = scratch[K_BIT]
    pos = scratch[K_POS]
    picked = scratch[K_PICKED]
    work = 0
    top = 0
    frames[0, S_LO], frames[0, S_HI], frames[0, S_NEXT] = 0, n_rows, n_bits - 1
    frames[0, S_SET], frames[0, S_DEPTH], frames[0, S_FREQ] = 0, depth, frequent
    while top >= 0:
        freq = frames[top, S_FREQ]
        f = frames[top, S_NEXT]
        while f >= 0 and not (freq >> f) & 1:
            f -= 1
        if f < 0:
            top -= 1
            continue
        frames[top, S_NEXT] = f - 1
        lo, hi = frames[top, S_LO], frames[top, S_HI]
        below = (1 << f) - 1
        end = hi
        for r in range(lo, hi):  # branch-free: a row is always written, kept only if it holds f and more
            m = masks[r]
            masks[end], weights[end], mults[end] = m & below, weights[r], mults[r]
            end += ((m >> f) & 1) & ((m & below) != 0)
        work += hi - lo + 1
        if end == hi:
            continue
        new_depth = frames[top, S_DEPTH] + 1
        chosen = frames[top, S_SET] | (1 << f)
        for b in range(f):
            cnt[b] = 0
        merged = 0
        for r in range(hi, end):
            merged += mults[r]
            m = masks[r]
            w = weights[r]
            for b in range(f):
                cnt[b] += w * ((m >> b) & 1)
        n_picked = 0
        m = chosen
        b = 0
        while m:
            if m & 1:
                picked[n_picked] = b
                n_picked += 1
            m >>= 1
            b += 1
        nf = 0
        child_freq = 0
        for b in range(f):
            if cnt[b] >= min_count:
                bits[nf] = b
                nf += 1
                child_freq |= 1 << b
        if nf == 0:
            continue
        if merged == 1:
            # a single path: its combinations by size, then lexicographically, as the loop lists them
            room = nf if max_size == 0 else min(nf, max_size - new_depth)
            count = weights[hi]
            for size in range(1, room + 1):
                for j in range(size):
                    pos[j] = j
                while True:
                    for j in range(size):
                        picked[n_picked + j] = bits[pos[j]]
                    i_top = _emit(
                        buf, n_suffix, key, picked, n_picked + size, extra, count, out_items, out_start,
                        out_count, n_out, i_top,
                    )  # fmt: skip
                    n_out += 1
                    i = size - 1
                    while i >= 0 and pos[i] == nf - size + i:
                        i -= 1
                    if i < 0:
                        break
                    pos[i] += 1
                    for j in range(i + 1, size):
                        pos[j] = pos[j - 1] + 1
            continue
        for t in range(nf):
            picked[n_picked] = bits[t]
            i_top = _emit(
                buf, n_suffix, key, picked, n_picked + 1, extra, cnt[bits[t]], out_items, out_start,
                out_count, n_out, i_top,
            )  # fmt: skip
            n_out += 1
        if max_size != 0 and new_depth + 1 >= max_size:
            continue
        for r in range(hi, end):
            masks[r] &= child_freq
        end = _merge(masks, weights, mults, hi, end, slot)
        top += 1
        frames[top, S_LO], frames[top, S_HI], frames[top, S_NEXT] = hi, end, f - 1
        frames[top, S_SET], frames[top, S_DEPTH], frames[top, S_FREQ] = chosen, new_depth, child_freq
    out_start[n_out] = i_top
    return n_out, i_top, work
