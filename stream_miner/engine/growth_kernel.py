"""The compiled (numba) loop of FP-growth over array-held conditional pattern bases.

Imported only by a mine (numba costs about 0.3 s to import); compiled code is cached on disk.
The loop is resumable: all its state lives in the arrays it is given (registers ``reg``,
arenas, the stack of frames, the output), so it stops after a bounded amount of work
(``PAUSED``: the caller polls its interrupt and calls again), when an arena or the output is
full (``GROW``: the caller enlarges it and calls again; the step is redone from its start)
or when the result would pass the cap (``TOO_MANY``).

A frame is a conditional base being grown. A base is a run of rows in the row arena (start
and length of its codes in the code arena, weight), its codes in increasing order. When a
frame is opened its frequent codes are counted and emitted, the infrequent ones removed in
place, and every frequent code's occurrences (row, position) listed, so that the base of a
child is read off its occurrences: for each, the row's prefix before it. Children are
visited from the highest code down, each base is projected only when it is visited, and
the emission order is the one of a stack-driven depth-first search that pushes children in
increasing order. A base of one row (a single path) opens a frame that lists the
combinations of its codes, by size then lexicographically, a bounded number per step.
"""

from __future__ import annotations

from numba import njit

from stream_miner.engine.growth_bits import BITS, K_KEY, grow_bits, write_itemset

DONE, PAUSED, GROW, TOO_MANY = 0, 1, 2, 3
# registers
DEPTH, A_TOP, R_TOP, O_TOP, F_TOP, NEXT_TOP, N_OUT, I_TOP, NEED_WHAT, NEED_SIZE, FOUND = range(11)
N_REGISTERS = 11
# what a GROW status asks for (reg[NEED_WHAT]); reg[NEED_SIZE] is the size needed
CODES, ROWS, FRAMES, FREQUENT, OUT, OUT_ITEMS, TABLE = range(7)
# columns of a frame
F_A_LO, F_R_LO, F_O_LO, F_F_LO, F_F_HI, F_NEXT, F_CODE, F_KIND, F_SIZE, F_ROOM, F_COUNT = range(11)
FRAME_COLUMNS = 11
GENERAL, SINGLE = 0, 1
NOTHING, OPENED, EMITTED = -1, 10, 11  # outcomes of opening a base
ROOT = 0
_TOO_BIG = 1 << 62


@njit(cache=True, nogil=True)
def _combinations(n: int, room: int) -> int:
    """Sum over sizes 1..room of C(n, size), or _TOO_BIG when that passes 2^62."""
    total = 0
    term = 1
    for size in range(1, room + 1):
        term = term * (n - size + 1) // size
        total += term
        if total >= _TOO_BIG or n > 62:
            return _TOO_BIG
    return total


@njit(cache=True, nogil=True)
def _suffix_items(f_info, depth, code, items_of_code, buf):
    """Write the item ids of the suffix (the codes of frames 0..depth-2, then ``code``),
    sorted, into ``buf``; return how many."""
    n = 0
    for k in range(depth):
        c = code if k == depth - 1 else f_info[k, F_CODE]
        x = items_of_code[c]
        j = n
        while j > 0 and buf[j - 1] > x:
            buf[j] = buf[j - 1]
            j -= 1
        buf[j] = x
        n += 1
    return n


@njit(cache=True, nogil=True)
def _table_size(n_rows: int) -> int:
    """Slots of the hash table for merging ``n_rows`` rows: a power of two, at least twice as many."""
    size = 1
    while size < 2 * n_rows:
        size *= 2
    return size


@njit(cache=True, nogil=True)
def _merge_rows(a_codes, r_start, r_len, r_weight, r_mult, r_lo, r_hi, table):
    """Fold every row of ``r_lo..r_hi`` equal to an earlier one into it (weights and
    multiplicities added; the later row's length set to -1), through a hash table."""
    size = _table_size(r_hi - r_lo)
    table[:size] = -1
    for r in range(r_lo, r_hi):
        begin, length = r_start[r], r_len[r]
        h = length
        for i in range(begin, begin + length):
            h = h * 1000003 ^ a_codes[i]
        slot = (h ^ (h >> 29)) & (size - 1)
        while True:
            q = table[slot]
            if q < 0:
                table[slot] = r
                break
            if r_len[q] == length:
                same = True
                for i in range(length):
                    if a_codes[r_start[q] + i] != a_codes[begin + i]:
                        same = False
                        break
                if same:
                    r_weight[q] += r_weight[r]
                    r_mult[q] += r_mult[r]
                    r_len[r] = -1
                    break
            slot = (slot + 1) & (size - 1)


@njit(cache=True, nogil=True)
def _count(
    a_codes, r_start, r_len, r_weight, r_mult, r_lo, r_hi, n_base, code, min_count, counts, touched, local
):
    """Count the codes of the base of ``code`` (rows ``r_lo..r_hi``, ``n_base`` codes), all below
    ``code``; list its frequent ones in ``touched`` in order (``local``: their places), clear
    the others' counts. Returns (the base's rows before any were merged, its frequent codes)."""
    n_rows = 0
    nf = 0
    if n_base >= code:  # a wide base: count without tracking, then read the codes below off in order
        for r in range(r_lo, r_hi):
            n_rows += r_mult[r]
            w = r_weight[r]
            for i in range(r_start[r], r_start[r] + r_len[r]):
                counts[a_codes[i]] += w
        for c in range(code):
            if counts[c] >= min_count:
                touched[nf] = c
                local[c] = nf
                nf += 1
            else:
                counts[c] = 0
        return n_rows, nf
    nt = 0
    for r in range(r_lo, r_hi):
        n_rows += r_mult[r]
        w = r_weight[r]
        for i in range(r_start[r], r_start[r] + r_len[r]):
            c = a_codes[i]
            if counts[c] == 0:
                touched[nt] = c
                nt += 1
            counts[c] += w
    touched[:nt].sort()
    for t in range(nt):
        if counts[touched[t]] >= min_count:
            touched[nf] = touched[t]
            local[touched[t]] = nf
            nf += 1
        else:
            counts[touched[t]] = 0
    return n_rows, nf


@njit(cache=True, nogil=True)
def _grow_small(
    a_codes, r_start, r_len, r_weight, r_mult, r_lo, r_hi, counts, touched, nf, items_of_code, depth,
    min_count, max_size, buf, bit_rows, bit_frames, bit_scratch, bit_slot, extra, out_items,
    out_start, out_count, n_out, i_top,
):  # fmt: skip
    """Hand the opened base of rows ``r_lo..r_hi`` (``nf`` frequent codes, ``touched[:nf]``,
    at most ``BITS``) to :func:`stream_miner.engine.growth_bits.grow_bits` as masks, equal
    ones merged; returns ``(n_out, i_top, work)``."""
    masks, weights, mults = bit_rows[0], bit_rows[1], bit_rows[2]
    for t in range(nf):  # the codes' bits, in place of their counts (the caller clears them)
        counts[touched[t]] = 1 << t
    n = 0
    for r in range(r_lo, r_hi):
        m = 0
        for i in range(r_start[r], r_start[r] + r_len[r]):
            m |= counts[a_codes[i]]
        if m == 0:
            continue
        q = bit_slot[m]
        if q >= 0:
            weights[q] += r_weight[r]
            mults[q] += r_mult[r]
        else:
            bit_slot[m] = n
            masks[n], weights[n], mults[n] = m, r_weight[r], r_mult[r]
            n += 1
    for r in range(n):
        bit_slot[masks[r]] = -1
    for t in range(nf):
        bit_scratch[K_KEY, t] = items_of_code[touched[t]]
    n_out, i_top, work = grow_bits(
        masks, weights, mults, n, nf, (1 << nf) - 1, depth, min_count, max_size, buf, depth, bit_frames,
        bit_scratch, bit_slot, extra, out_items, out_start, out_count, n_out, i_top,
    )  # fmt: skip
    return n_out, i_top, work + r_hi - r_lo


@njit(cache=True, nogil=True)
def grow(
    parent,
    node_count,
    node_item,
    code_of,
    top_nodes,
    top_bounds,
    items_of_code,
    min_count,
    max_size,
    cap,
    emitted_before,
    budget,
    reg,
    a_codes,
    r_start,
    r_len,
    r_weight,
    r_mult,
    o_row,
    o_pos,
    f_info,
    fc_code,
    fc_olo,
    fc_ohi,
    table,
    counts,
    touched,
    local,
    buf,
    extra,
    bit_rows,
    bit_frames,
    bit_scratch,
    bit_slot,
    out_items,
    out_start,
    out_count,
):
    """Grow every itemset of two or more codes (see the module docstring); returns a status.

    ``max_size`` 0 means no limit, ``cap`` -1 no cap; ``emitted_before`` itemsets (the
    single items) count against the cap. ``out_start[i]`` is where itemset ``i``'s sorted
    item ids begin in ``out_items`` (the next one's start is where it ends).
    """
    n_codes = top_bounds.size - 1
    work = 0
    while True:
        if work >= budget:
            return PAUSED
        depth = reg[DEPTH]
        a_top, r_top, o_top, f_top = reg[A_TOP], reg[R_TOP], reg[O_TOP], reg[F_TOP]
        n_out, i_top = reg[N_OUT], reg[I_TOP]
        if depth > 0 and f_info[depth - 1, F_KIND] == SINGLE:
            # list the next combinations of a single path
            fr = depth - 1
            f_lo, f_hi = f_info[fr, F_F_LO], f_info[fr, F_F_HI]
            n_path = f_hi - f_lo
            size, room, count = f_info[fr, F_SIZE], f_info[fr, F_ROOM], f_info[fr, F_COUNT]
            chunk = 4096
            if n_out + chunk + 1 > out_count.size:
                reg[NEED_WHAT], reg[NEED_SIZE] = OUT, n_out + chunk + 1
                return GROW
            if i_top + chunk * (depth + room) > out_items.size:
                reg[NEED_WHAT], reg[NEED_SIZE] = OUT_ITEMS, i_top + chunk * (depth + room)
                return GROW
            n_suffix = _suffix_items(f_info, depth, f_info[fr, F_CODE], items_of_code, buf)
            listed = 0
            while listed < chunk and size <= room:
                for j in range(size):
                    x = items_of_code[fc_code[f_lo + fc_olo[f_lo + j]]]
                    k = j
                    while k > 0 and extra[k - 1] > x:
                        extra[k] = extra[k - 1]
                        k -= 1
                    extra[k] = x
                out_start[n_out] = i_top
                i_top = write_itemset(buf, n_suffix, extra, size, out_items, i_top)
                out_count[n_out] = count
                n_out += 1
                listed += 1
                # the next combination of ``size`` positions, lexicographically
                i = size - 1
                while i >= 0 and fc_olo[f_lo + i] == n_path - size + i:
                    i -= 1
                if i < 0:
                    size += 1
                    if size <= room:
                        for j in range(size):
                            fc_olo[f_lo + j] = j
                else:
                    fc_olo[f_lo + i] += 1
                    for j in range(i + 1, size):
                        fc_olo[f_lo + j] = fc_olo[f_lo + j - 1] + 1
            out_start[n_out] = i_top
            work += listed * (depth + size)
            reg[N_OUT], reg[I_TOP] = n_out, i_top
            f_info[fr, F_SIZE] = size
            if size > room:
                reg[DEPTH] = depth - 1
                reg[A_TOP], reg[R_TOP] = f_info[fr, F_A_LO], f_info[fr, F_R_LO]
                reg[O_TOP] = f_info[fr, F_O_LO]
                reg[F_TOP] = f_lo
            continue
        # ---- make the next base: from the tree (depth 0) or from the top frame's next child
        r_lo, a_lo = r_top, a_top
        if depth == 0:
            code = reg[NEXT_TOP]
            if code >= n_codes:
                return DONE
            lo, hi = top_bounds[code], top_bounds[code + 1]
            if r_top + (hi - lo) > r_start.size:
                reg[NEED_WHAT], reg[NEED_SIZE] = ROWS, r_top + (hi - lo)
                return GROW
            a = a_top
            for k in range(lo, hi):
                node = top_nodes[k]
                begin = a
                p = parent[node]
                while p != ROOT:
                    c = code_of[node_item[p]]
                    if c >= 0:
                        if a >= a_codes.size:
                            reg[NEED_WHAT], reg[NEED_SIZE] = CODES, a_codes.size + 1
                            return GROW
                        a_codes[a] = c
                        a += 1
                    p = parent[p]
                    work += 1
                # climbing visits the codes from the leaf end: reverse them
                i, j = begin, a - 1
                while i < j:
                    a_codes[i], a_codes[j] = a_codes[j], a_codes[i]
                    i += 1
                    j -= 1
                row = r_top + k - lo
                r_start[row], r_len[row], r_weight[row] = begin, a - begin, node_count[node]
                r_mult[row] = 1
            r_hi, a_hi = r_top + (hi - lo), a
        else:
            fr = depth - 1
            nxt = f_info[fr, F_NEXT]
            if nxt < f_info[fr, F_F_LO]:  # every child visited: close the frame
                reg[DEPTH] = depth - 1
                reg[A_TOP], reg[R_TOP] = f_info[fr, F_A_LO], f_info[fr, F_R_LO]
                reg[O_TOP] = f_info[fr, F_O_LO]
                reg[F_TOP] = f_info[fr, F_F_LO]
                continue
            code = fc_code[nxt]
            # the child's rows point at their prefixes in the parent's rows: nothing is copied
            # unless the child is opened as a frame (then its frequent codes only, from a_lo on)
            n_base, row = 0, r_top
            for o in range(fc_olo[nxt], fc_ohi[nxt]):
                src = o_row[o]
                begin = r_start[src]
                length = o_pos[o] - begin
                if length == 0:
                    continue
                if row >= r_start.size:
                    reg[NEED_WHAT], reg[NEED_SIZE] = ROWS, row + 1
                    return GROW
                r_start[row], r_len[row], r_weight[row] = begin, length, r_weight[src]
                r_mult[row] = r_mult[src]
                n_base += length
                row += 1
            work += row - r_top + 1
            r_hi, a_hi = row, a_lo + n_base  # a_hi - a_lo: the codes of the base
            if r_hi == r_lo:  # no row holds a code before this one
                f_info[fr, F_NEXT] = nxt - 1
                continue
        # ---- open the base of suffix + code (suffix length = depth + 1)
        new_depth = depth + 1
        if a_hi == a_lo:
            status = NOTHING
        else:
            n_rows, nf = _count(
                a_codes, r_start, r_len, r_weight, r_mult, r_lo, r_hi, a_hi - a_lo, code, min_count, counts,
                touched, local,
            )  # fmt: skip
            work += a_hi - a_lo + min(a_hi - a_lo, code)
            status = NOTHING
            if nf > 0 and n_rows == 1:
                room = nf if max_size == 0 else min(nf, max_size - new_depth)
                more = _combinations(nf, room)
                if cap >= 0 and emitted_before + n_out + more > cap:
                    status = TOO_MANY
                    reg[FOUND] = -1 if more >= _TOO_BIG else emitted_before + n_out + more
                    reg[NEED_WHAT], reg[NEED_SIZE] = nf, room
                elif f_top + nf > fc_code.size:
                    status, reg[NEED_WHAT], reg[NEED_SIZE] = GROW, FREQUENT, f_top + nf
                elif new_depth > f_info.shape[0]:
                    status, reg[NEED_WHAT], reg[NEED_SIZE] = GROW, FRAMES, new_depth
                else:
                    fr = new_depth - 1
                    for t in range(nf):
                        fc_code[f_top + t] = touched[t]
                        fc_olo[f_top + t] = t
                    f_info[fr, F_A_LO], f_info[fr, F_R_LO], f_info[fr, F_O_LO] = a_lo, r_lo, o_top
                    f_info[fr, F_F_LO], f_info[fr, F_F_HI], f_info[fr, F_CODE] = f_top, f_top + nf, code
                    f_info[fr, F_KIND], f_info[fr, F_SIZE], f_info[fr, F_ROOM] = SINGLE, 1, room
                    f_info[fr, F_COUNT] = r_weight[r_lo]
                    status = OPENED
                for t in range(nf):
                    counts[touched[t]] = 0
            elif nf > 0:
                deeper = max_size == 0 or new_depth + 1 < max_size
                small = deeper and nf <= BITS  # its whole subtree is grown as bit masks
                n_more = nf + (1 << nf) if small else nf  # at most, with their widest
                width = new_depth + nf + 1 if small else new_depth + 1
                deeper = deeper and not small
                if cap >= 0 and emitted_before + n_out + nf > cap:
                    status = TOO_MANY
                    reg[FOUND] = emitted_before + n_out + nf
                elif n_out + n_more + 1 > out_count.size:
                    status, reg[NEED_WHAT], reg[NEED_SIZE] = GROW, OUT, n_out + n_more + 1
                elif i_top + n_more * width > out_items.size:
                    status, reg[NEED_WHAT], reg[NEED_SIZE] = GROW, OUT_ITEMS, i_top + n_more * width
                elif deeper and o_top + (a_hi - a_lo) > o_row.size:
                    status, reg[NEED_WHAT], reg[NEED_SIZE] = GROW, CODES, o_top + (a_hi - a_lo)
                elif deeper and a_hi > a_codes.size:
                    status, reg[NEED_WHAT], reg[NEED_SIZE] = GROW, CODES, a_hi
                elif deeper and f_top + nf > fc_code.size:
                    status, reg[NEED_WHAT], reg[NEED_SIZE] = GROW, FREQUENT, f_top + nf
                elif deeper and new_depth > f_info.shape[0]:
                    status, reg[NEED_WHAT], reg[NEED_SIZE] = GROW, FRAMES, new_depth
                elif deeper and _table_size(r_hi - r_lo) > table.size:
                    status, reg[NEED_WHAT], reg[NEED_SIZE] = GROW, TABLE, _table_size(r_hi - r_lo)
                else:
                    n_suffix = _suffix_items(f_info, new_depth, code, items_of_code, buf)
                    for t in range(nf):
                        extra[0] = items_of_code[touched[t]]
                        out_start[n_out] = i_top
                        i_top = write_itemset(buf, n_suffix, extra, 1, out_items, i_top)
                        out_count[n_out] = counts[touched[t]]
                        n_out += 1
                    out_start[n_out] = i_top
                    status = EMITTED
                    if small:
                        n_out, i_top, spent = _grow_small(
                            a_codes, r_start, r_len, r_weight, r_mult, r_lo, r_hi, counts, touched, nf,
                            items_of_code, new_depth, min_count, max_size, buf, bit_rows, bit_frames,
                            bit_scratch, bit_slot, extra, out_items, out_start, out_count, n_out, i_top,
                        )  # fmt: skip
                        work += spent
                        if cap >= 0 and emitted_before + n_out > cap:
                            status = TOO_MANY
                            reg[FOUND] = emitted_before + n_out
                    elif deeper:
                        # keep the frequent codes (a child's rows are copied off the parent's here, a top
                        # base's in place); list each frequent code's occurrences
                        for t in range(nf):
                            fc_code[f_top + t] = touched[t]
                            fc_ohi[f_top + t] = 0
                        a = a_lo
                        for r in range(r_lo, r_hi):
                            begin = a
                            for i in range(r_start[r], r_start[r] + r_len[r]):
                                c = a_codes[i]
                                if counts[c] >= min_count:
                                    a_codes[a] = c
                                    a += 1
                            r_start[r], r_len[r] = begin, a - begin
                        _merge_rows(a_codes, r_start, r_len, r_weight, r_mult, r_lo, r_hi, table)
                        for r in range(r_lo, r_hi):
                            for i in range(r_start[r], r_start[r] + max(r_len[r], 0)):
                                fc_ohi[f_top + local[a_codes[i]]] += 1
                        at = o_top
                        for t in range(nf):
                            fc_olo[f_top + t] = at
                            at += fc_ohi[f_top + t]
                            fc_ohi[f_top + t] = fc_olo[f_top + t]
                        for r in range(r_lo, r_hi):
                            for i in range(r_start[r], r_start[r] + max(r_len[r], 0)):
                                slot = f_top + local[a_codes[i]]
                                o_row[fc_ohi[slot]], o_pos[fc_ohi[slot]] = r, i
                                fc_ohi[slot] += 1
                        work += 2 * (a - a_lo)
                        fr = new_depth - 1
                        f_info[fr, F_A_LO], f_info[fr, F_R_LO], f_info[fr, F_O_LO] = a_lo, r_lo, o_top
                        f_info[fr, F_F_LO], f_info[fr, F_F_HI], f_info[fr, F_CODE] = f_top, f_top + nf, code
                        f_info[fr, F_NEXT], f_info[fr, F_KIND] = f_top + nf - 1, GENERAL
                        o_top = at
                        a_top, r_top, f_top = a, r_hi, f_top + nf
                        status = OPENED
                for t in range(nf):
                    counts[touched[t]] = 0
        if status == TOO_MANY:
            return TOO_MANY
        if status == GROW:
            return GROW
        # ---- commit the step
        if depth == 0:
            reg[NEXT_TOP] = code + 1
        else:
            f_info[depth - 1, F_NEXT] -= 1
        if status == OPENED:
            reg[DEPTH] = new_depth
            if f_info[new_depth - 1, F_KIND] == SINGLE:
                reg[F_TOP] = f_top + nf
            else:
                reg[A_TOP], reg[R_TOP], reg[O_TOP], reg[F_TOP] = a_top, r_top, o_top, f_top
        reg[N_OUT], reg[I_TOP] = n_out, i_top
