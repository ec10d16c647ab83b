"""Property tests for the parts of incremental mining: row lookups and the Apriori join,
vertical bitmap counts, the pair table, the window scan kernel and the border tracker, each
against a plain-Python brute force."""

from __future__ import annotations

from collections import Counter
from itertools import combinations, pairwise

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from brute_force import frequent_itemsets
from stream_miner.engine.baskets import BasketArrays
from stream_miner.engine.incremental import bitmaps, pair_table
from stream_miner.engine.incremental.bitmaps import count_rows, item_bitmaps, sign_bitmap, window_counts
from stream_miner.engine.incremental.itemset_rows import (
    RowIndex,
    empty_rows,
    join_candidates,
    match_rows,
    unique_rows,
)
from stream_miner.engine.incremental.kernels import (
    add_pairs,
    add_pairs_numpy,
    compiled,
    rows_holding,
    rows_holding_numpy,
)
from stream_miner.engine.incremental.pair_table import FIRST_CAPACITY, PairTable
from stream_miner.engine.incremental.tracker import BorderTracker

SETTINGS = settings(max_examples=100, deadline=None)


# ----------------------------------------------------------------- helpers
def as_matrix(rows: list[list[int]], width: int) -> np.ndarray:
    return np.array(rows, dtype=np.int64).reshape(len(rows), width)


def dict_lookup(reference: np.ndarray, query: np.ndarray) -> list[int]:
    """Index of the first equal reference row for every query row, -1 when absent."""
    first: dict[tuple, int] = {}
    for i, row in enumerate(reference.tolist()):
        first.setdefault(tuple(row), i)
    return [first.get(tuple(row), -1) for row in query.tolist()]


def source_of(window: list[list[int]]):
    """A window source: the baskets of ``window`` holding any flagged item."""
    return lambda flags: BasketArrays.from_lists(
        [b for b in window if any(i < flags.size and flags[i] for i in b)]
    )


def holds(basket, itemset) -> bool:
    return set(itemset) <= set(basket)


def pair_counts(window: list[list[int]], watched: set[int]) -> Counter:
    """Count of every pair (sorted) of watched items over the window."""
    counts: Counter = Counter()
    for basket in window:
        counts.update(combinations(sorted(set(basket) & watched), 2))
    return counts


def is_lexicographic(rows: list[list[int]]) -> bool:
    return all(a <= b for a, b in pairwise(rows))


# ----------------------------------------------------------- itemset_rows
small_rows = st.integers(1, 4).flatmap(
    lambda w: st.tuples(
        st.just(w),
        st.lists(st.lists(st.integers(0, 5), min_size=w, max_size=w), max_size=25),
        st.lists(st.lists(st.integers(0, 8), min_size=w, max_size=w), max_size=25),
    )
)


@SETTINGS
@given(small_rows)
def test_unique_rows_are_the_distinct_rows_in_lexicographic_order(case):
    """unique_rows: the distinct rows, sorted lexicographically."""
    width, rows, _ = case
    assert unique_rows(as_matrix(rows, width)).tolist() == [list(r) for r in sorted(set(map(tuple, rows)))]


@SETTINGS
@given(small_rows, st.data())
def test_match_rows_packed_equals_dict_lookup(case, data):
    """match_rows / RowIndex.find on the packed-key path: first matching reference row, -1 when absent."""
    width, reference_rows, extra = case
    reference = as_matrix(reference_rows, width)
    hits = data.draw(st.lists(st.sampled_from(reference_rows), max_size=10)) if reference_rows else []
    query = as_matrix(data.draw(st.permutations(hits + extra)), width)
    assert RowIndex(reference).packs
    expected = dict_lookup(reference, query)
    assert match_rows(reference, query).tolist() == expected
    assert RowIndex(reference).find(query).tolist() == expected


@SETTINGS
@given(st.data())
def test_match_rows_fallback_for_wide_rows_of_many_items_equals_dict_lookup(data):
    """match_rows when keys cannot be packed (width 12, >= 48 distinct items): the sorting path
    is taken and gives the same answer as a dict lookup, repeated rows included."""
    width = 12
    row = st.lists(st.integers(0, 59), min_size=width, max_size=width)
    cover = [list(range(s, s + width)) for s in range(0, 48, width)]  # 48 distinct items
    random_rows = data.draw(st.lists(row, max_size=20))
    reference_rows = data.draw(st.permutations(cover + random_rows))
    reference_rows += data.draw(st.lists(st.sampled_from(reference_rows), max_size=5))  # repeats
    reference = as_matrix(reference_rows, width)
    query_rows = data.draw(st.lists(st.sampled_from(reference_rows), max_size=10))
    query_rows += data.draw(
        st.lists(st.lists(st.integers(0, 70), min_size=width, max_size=width), max_size=10)
    )
    query = as_matrix(data.draw(st.permutations(query_rows)), width)
    index = RowIndex(reference)
    assert not index.packs
    expected = dict_lookup(reference, query)
    assert index.find(query).tolist() == expected
    assert match_rows(reference, query).tolist() == expected


@SETTINGS
@given(small_rows)
def test_empty_rows_match_nothing(case):
    """empty_rows: a (0, width) int64 matrix; nothing is found in it and it finds nothing."""
    width, rows, _ = case
    empty = empty_rows(width)
    assert empty.shape == (0, width) and empty.dtype == np.int64
    query = as_matrix(rows, width)
    assert match_rows(empty, query).tolist() == [-1] * len(rows)
    assert match_rows(query, empty).tolist() == []


def apriori_gen(frequent: list[tuple[int, ...]]) -> list[list[int]]:
    """Every sorted (k+1)-itemset whose k-subsets are all in ``frequent``, lexicographically."""
    rows = set(frequent)
    if not rows:
        return []
    k = len(frequent[0])
    universe = sorted({i for row in rows for i in row})
    return [list(c) for c in combinations(universe, k + 1) if all(s in rows for s in combinations(c, k))]


@SETTINGS
@given(
    st.integers(1, 4).flatmap(
        lambda k: st.tuples(st.just(k), st.lists(st.booleans(), min_size=35, max_size=35))
    )
)
def test_join_candidates_equals_brute_force_apriori_gen(case):
    """join_candidates on k-itemsets (k = 1..4): exactly the Apriori-gen candidates, in order."""
    k, mask = case
    frequent = [c for c, keep in zip(combinations(range(7), k), mask, strict=False) if keep]
    out = join_candidates(as_matrix([list(r) for r in frequent], k))
    assert out.shape[1] == k + 1
    assert out.tolist() == apriori_gen(frequent)


def test_join_candidates_of_single_items():
    """join_candidates on 1-itemsets: every pair of the items (regression: it gave none)."""
    frequent = [(1,), (2,), (3,)]
    assert join_candidates(as_matrix([list(r) for r in frequent], 1)).tolist() == apriori_gen(frequent)


# ---------------------------------------------------------------- bitmaps
baskets_st = st.lists(st.lists(st.integers(0, 14), unique=True, max_size=8), max_size=140)


@st.composite
def slotted_batches(draw):
    """Baskets, an injective item -> slot map (some items unslotted, some past its end),
    a number of slots, rows of slots and signs."""
    baskets = draw(baskets_st)
    length = draw(st.integers(0, 16))
    chosen = draw(st.lists(st.booleans(), min_size=length, max_size=length))
    order = draw(st.permutations(range(length)))
    slot_of = np.full(length, -1, dtype=np.int64)
    n_used = 0
    for item in order:
        if chosen[item]:
            slot_of[item] = n_used
            n_used += 1
    n_slots = n_used + draw(st.integers(0, 2))  # maybe some slots without an item
    rows = []
    if n_slots:
        rows = draw(st.lists(st.lists(st.integers(0, n_slots - 1), min_size=1, max_size=3), max_size=20))
    k = max((len(r) for r in rows), default=1)
    rows = [r + [r[0]] * (k - len(r)) for r in rows]  # pad by repeating a slot: same itemset
    signs = draw(st.lists(st.integers(-2, 2), min_size=len(baskets), max_size=len(baskets)))
    return baskets, slot_of, n_slots, as_matrix(rows, k), np.array(signs, dtype=np.int64)


def check_bitmap_counts(baskets, slot_of, n_slots, rows, signs):
    batch = BasketArrays.from_lists(baskets)
    bits = item_bitmaps(batch, slot_of, n_slots)
    words = (len(baskets) + 63) // 64
    assert bits.shape == (n_slots, words) and bits.dtype == np.uint64
    item_at = {int(s): i for i, s in enumerate(slot_of.tolist()) if s >= 0}
    for s in range(n_slots):
        for r in range(words * 64):
            bit = (int(bits[s, r >> 6]) >> (r & 63)) & 1
            assert bit == (r < len(baskets) and s in item_at and item_at[s] in baskets[r])
    plus = sign_bitmap(signs)
    assert plus.size == words
    for r in range(words * 64):
        assert (int(plus[r >> 6]) >> (r & 63)) & 1 == (r < signs.size and signs[r] > 0)
    itemsets = [[item_at.get(s, -1) for s in row] for row in rows.tolist()]
    containing = [[r for r, b in enumerate(baskets) if all(i in b for i in items)] for items in itemsets]
    assert count_rows(rows, bits).tolist() == [len(c) for c in containing]
    assert count_rows(rows, bits, plus).tolist() == [
        sum(1 if signs[r] > 0 else -1 for r in c) for c in containing
    ]


@SETTINGS
@given(slotted_batches())
def test_item_bitmaps_sign_bitmap_and_count_rows_equal_brute_force(case):
    """item_bitmaps sets exactly the bits of slotted items; sign_bitmap the bits of positive
    signs; count_rows counts (and signed counts) the baskets holding every itemset."""
    check_bitmap_counts(*case)


@st.composite
def window_itemsets(draw):
    """Baskets, rows of distinct item ids (some absent from every basket), and item counts:
    the true ones or arbitrary ones (any item of an itemset is a valid anchor)."""
    baskets = draw(baskets_st)
    k = draw(st.integers(1, 4))
    rows = draw(
        st.lists(st.lists(st.integers(0, 17), min_size=k, max_size=k, unique=True).map(sorted), max_size=25)
    )
    size = max([18] + [i + 1 for b in baskets for i in b])
    if draw(st.booleans()):
        items = [i for b in baskets for i in b]
        item_counts = np.bincount(np.array(items, dtype=np.int64), minlength=size)
    else:
        item_counts = np.array(
            draw(st.lists(st.integers(0, 50), min_size=size, max_size=size)), dtype=np.int64
        )
    return baskets, as_matrix(rows, k), item_counts


def check_window_counts(baskets, rows, item_counts):
    out = window_counts(rows, source_of(baskets), item_counts)
    assert out.tolist() == [sum(holds(b, r) for b in baskets) for r in rows.tolist()]


@SETTINGS
@given(window_itemsets())
def test_window_counts_equal_brute_force(case):
    """window_counts: the count of every itemset over the whole window."""
    check_window_counts(*case)


@SETTINGS
@given(window_itemsets(), slotted_batches())
def test_counts_stay_exact_in_tiny_chunks(counted, slotted):
    """window_counts and count_rows with 3 baskets per pass and 2 words in flight (the
    chunking loops run many times) still equal the brute force."""
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(bitmaps, "BASKETS_PER_PASS", 3)
        patch.setattr(bitmaps, "WORDS_IN_FLIGHT", 2)
        check_window_counts(*counted)
        check_bitmap_counts(*slotted)


# ---------------------------------------------------------------- kernels
@pytest.mark.parametrize("version", ["compiled", "numpy"])
@pytest.mark.parametrize("dtype", [np.uint16, np.int64])
@SETTINGS
@given(
    st.lists(
        st.lists(st.sampled_from([0, 1, 2, 3, 5, 8, 13, 21, 40, 300, 65535]), unique=True, max_size=6),
        max_size=40,
    ),
    st.data(),
)
def test_rows_holding_equals_python_loop(version, dtype, baskets, data):
    """rows_holding: indices of the live baskets holding a wanted item; items past the end
    of ``wanted`` are not wanted."""
    batch = BasketArrays.from_lists(baskets)
    alive = np.array(
        data.draw(st.lists(st.booleans(), min_size=len(baskets), max_size=len(baskets))), dtype=bool
    )
    largest = max((i for b in baskets for i in b), default=0)
    size = data.draw(st.integers(0, min(largest, 50)))  # shorter than the largest id
    wanted = np.array(data.draw(st.lists(st.booleans(), min_size=size, max_size=size)), dtype=bool)
    loop = compiled(rows_holding) if version == "compiled" else rows_holding_numpy
    out = loop(batch.items.astype(dtype), batch.start, alive, wanted)
    expected = [r for r, b in enumerate(baskets) if alive[r] and any(i < size and wanted[i] for i in b)]
    assert out.dtype == np.int64
    assert out.tolist() == expected


@SETTINGS
@given(
    st.lists(st.lists(st.integers(0, 12), unique=True, max_size=8), max_size=30),
    st.data(),
)
def test_pair_loops_in_numpy_and_compiled_count_alike(baskets, data):
    """add_pairs in numpy and compiled: the same counts from the same start, and the same
    cells at or above the report bound among those each reports (what callers read)."""
    batch = BasketArrays.from_lists(baskets)
    n = len(baskets)
    signs = np.array(data.draw(st.lists(st.sampled_from([-1, 1]), min_size=n, max_size=n)))
    watched = data.draw(st.lists(st.booleans(), min_size=11, max_size=11))
    slots = iter(data.draw(st.permutations(range(10))))
    slot_of = np.array([next(slots) if w else -1 for w in watched[:10]] + [-1], dtype=np.int64)  # distinct
    only = data.draw(st.one_of(st.none(), st.lists(st.booleans(), min_size=0, max_size=14)))
    only = None if only is None else np.array(only, dtype=bool)
    start = np.array(data.draw(st.lists(st.integers(0, 3), min_size=45, max_size=45)), dtype=np.int32)
    report_from = data.draw(st.integers(1, 4))
    found = []
    for loop in (compiled(add_pairs), add_pairs_numpy):
        counts, cells = start.copy(), np.empty(2000, dtype=np.int64)
        n = loop(batch.items, batch.start, signs.astype(np.int32), slot_of, only, counts, report_from, cells)
        reported = np.unique(cells[:n])
        found.append((counts, reported[counts[reported] >= report_from].tolist()))
    (compiled_counts, compiled_cells), (numpy_counts, numpy_cells) = found
    assert np.array_equal(compiled_counts, numpy_counts)
    assert compiled_cells == numpy_cells


# ------------------------------------------------------------- pair table
@st.composite
def pair_table_plans(draw):
    """A universe of items and operations: ("watch", wanted mask) or ("add", entering
    baskets, picks of baskets to remove (from the window or just entering), order of the
    batch, report_from)."""
    n_items = draw(st.one_of(st.integers(2, 12), st.integers(2, 150)))
    basket = st.lists(st.integers(0, n_items - 1), unique=True, max_size=8)
    plan, stored = [], 0
    for _ in range(draw(st.integers(1, 8))):
        if draw(st.booleans()):
            length = draw(st.integers(0, n_items))
            plan.append(
                (
                    "watch",
                    np.array(draw(st.lists(st.booleans(), min_size=length, max_size=length)), dtype=bool),
                )
            )
        else:
            entering = draw(st.lists(basket, max_size=12))
            picks = draw(
                st.lists(st.integers(0, 10**6), max_size=min(stored + len(entering), 6), unique=True)
            )
            order = draw(st.permutations(range(len(entering) + len(picks))))
            plan.append(("add", entering, picks, order, draw(st.integers(1, 4))))
            stored += len(entering) - len({p % max(1, stored + len(entering)) for p in picks})
    return n_items, plan


def check_table(table: PairTable, window, watched: set[int], data):
    """Counts of all pairs of watched items, pairs_among and pairs_with against brute force."""
    truth = pair_counts(window, watched)
    assert set(np.flatnonzero(table.watched).tolist()) == watched
    pairs = list(combinations(sorted(watched), 2))
    if pairs:
        first, second = np.array(pairs).T
        assert table.count(first, second).tolist() == [truth[p] for p in pairs]
        assert table.count(second, first).tolist() == [truth[p] for p in pairs]
    size = max(watched, default=-1) + 1 + data.draw(st.integers(0, 3))
    subset = set(data.draw(st.sets(st.sampled_from(sorted(watched)))) if watched else set())
    mask = np.zeros(size, dtype=bool)
    mask[sorted(subset)] = True
    at_least = data.draw(st.integers(1, 4))
    among = table.pairs_among(mask, at_least).tolist()
    assert among == [list(p) for p in sorted(truth) if set(p) <= subset and truth[p] >= at_least]
    entering = sorted(data.draw(st.sets(st.sampled_from(sorted(watched)))) if watched else set())
    with_rows = table.pairs_with(np.array(entering, dtype=np.int64), mask, at_least).tolist()
    expected = {
        tuple(sorted((e, o)))
        for e in entering
        for o in subset
        if e != o and truth[tuple(sorted((e, o)))] >= at_least
    }
    assert {tuple(r) for r in with_rows} == expected
    assert all(a < b for a, b in with_rows) and is_lexicographic(with_rows)


@settings(max_examples=80, deadline=None)
@given(pair_table_plans(), st.data())
def test_pair_table_stays_exact_through_watches_and_window_changes(plan, data):
    """PairTable through random watch/add steps: every pair of watched items counted exactly
    over the window; pairs_among/pairs_with equal brute-force filters; add returns exactly
    the distinct touched pairs whose count after the batch is at least report_from, also
    when baskets leave or enter and leave in the same batch."""
    _, steps = plan
    table, window, watched = PairTable(), [], set()
    for step in steps:
        if step[0] == "watch":
            wanted = step[1]
            item_counts = np.bincount(
                np.array([i for b in window for i in b], dtype=np.int64), minlength=wanted.size
            )
            table.watch(wanted, source_of(window), item_counts)
            watched = set(np.flatnonzero(wanted).tolist())
        else:
            _, entering, picks, order, report_from = step
            grown = window + entering
            leaving_at = sorted({p % len(grown) for p in picks}) if grown else []
            batch = [(b, 1) for b in entering] + [(grown[i], -1) for i in leaving_at]
            batch = [batch[i] for i in order if i < len(batch)]
            window = [b for i, b in enumerate(grown) if i not in set(leaving_at)]
            reported = table.add(
                BasketArrays.from_lists([b for b, _ in batch]),
                np.array([s for _, s in batch], dtype=np.int64),
                report_from,
            ).tolist()
            after = pair_counts(window, watched)
            touched = {p for b, _ in batch for p in combinations(sorted(set(b) & watched), 2)}
            now = [list(p) for p in sorted(touched) if after[p] >= report_from]
            assert reported == now
        check_table(table, window, watched, data)


@settings(max_examples=30, deadline=None)
@given(st.lists(st.lists(st.integers(0, 149), unique=True, max_size=10), min_size=1, max_size=60), st.data())
def test_pair_table_grows_past_its_first_capacity(window, data):
    """Watching 65..150 items grows the table past FIRST_CAPACITY slots; counts stay exact
    after growth, after unwatching some items and after watching them again."""
    first = np.zeros(150, dtype=bool)
    first[: data.draw(st.integers(FIRST_CAPACITY + 1, 150))] = True
    counts = np.bincount(np.array([i for b in window for i in b], dtype=np.int64), minlength=150)
    table = PairTable()
    table.watch(first[: FIRST_CAPACITY // 2], source_of(window), counts)
    table.watch(first, source_of(window), counts)
    assert table.capacity > FIRST_CAPACITY
    check_table(table, window, set(np.flatnonzero(first).tolist()), data)
    second = first & np.array(data.draw(st.lists(st.booleans(), min_size=150, max_size=150)))
    table.watch(second, source_of(window), counts)
    check_table(table, window, set(np.flatnonzero(second).tolist()), data)
    table.watch(first, source_of(window), counts)
    check_table(table, window, set(np.flatnonzero(first).tolist()), data)


def test_pair_table_with_every_slot_taken_reads_no_cell_past_its_end():
    """Regression: with exactly FIRST_CAPACITY items watched, the last slot paired with itself
    addressed the cell one past the triangle (IndexError in pairs_with and pairs_among, seen
    on a dense stream with 64 distinct items)."""
    rng = np.random.default_rng(4)
    window = [sorted(rng.choice(FIRST_CAPACITY, size=8, replace=False).tolist()) for _ in range(200)]
    counts = np.bincount(np.array([i for b in window for i in b]), minlength=FIRST_CAPACITY)
    table = PairTable()
    every = np.ones(FIRST_CAPACITY, dtype=bool)
    table.watch(every, source_of(window), counts)
    assert table.capacity == FIRST_CAPACITY
    truth = pair_counts(window, set(range(FIRST_CAPACITY)))
    expected = sorted(list(p) for p, n in truth.items() if n >= 2)
    assert table.pairs_among(every, 2).tolist() == expected
    last = int(np.flatnonzero(table.item_at == table.item_at[-1])[0])  # the item in the last slot
    item = int(table.item_at[last])
    with_rows = table.pairs_with(np.array([item]), every, 2).tolist()
    assert with_rows == [p for p in expected if item in p]


def test_pair_table_add_reports_only_pairs_now_at_report_from():
    """add: a pair that enters and leaves in one batch ends at count 0, below report_from 1,
    so it is not reported although it reached 1 during the batch (regression: it was)."""
    table = PairTable()
    table.watch(np.array([True, True]), source_of([]), np.zeros(2, dtype=np.int64))
    reported = table.add(BasketArrays.from_lists([[0, 1], [0, 1]]), np.array([1, -1]), 1)
    assert table.count(np.array([0]), np.array([1])).tolist() == [0]
    assert reported.tolist() == []


# --------------------------------------------------------- border tracker
@st.composite
def tracker_plans(draw):
    """Tracker settings, an allowed mask, and ticks: entering baskets, picks of window
    baskets to expire, whether expiries come first in the batch, and the tick's threshold."""
    n_items = draw(st.integers(3, 10))
    basket = st.lists(st.integers(0, n_items - 1), unique=True, min_size=1, max_size=6)
    length = draw(st.integers(0, n_items + 2))
    allowed = np.array(draw(st.lists(st.booleans(), min_size=length, max_size=length)), dtype=bool)
    ticks, stored = [], 0
    for _ in range(draw(st.integers(1, 10))):
        entering = draw(st.lists(basket, max_size=8))
        picks = draw(st.lists(st.integers(0, 10**6), max_size=min(stored + len(entering), 6), unique=True))
        ticks.append(
            (entering, picks, draw(st.booleans()), draw(st.one_of(st.integers(1, 3), st.integers(1, 8))))
        )
        stored += len(entering) - len({p % max(1, stored + len(entering)) for p in picks})
    return draw(st.sampled_from([None, 1, 2, 3])), draw(st.sampled_from([0.0, 0.25, 0.5])), allowed, ticks


def step_window(tracker: BorderTracker, window: list, tick) -> list:
    """Apply one tick's entering (+1) and expiring (-1) baskets to the tracker in one batch
    (expired baskets may include ones that entered in this very batch)."""
    entering, picks, expiries_first, _ = tick
    grown = window + entering
    gone = sorted({p % len(grown) for p in picks}) if grown else []
    leaving = [grown[i] for i in gone]
    parts = [(entering, 1), (leaving, -1)]
    if expiries_first:
        parts.reverse()
    changed = [b for baskets, _ in parts for b in baskets]
    signs = np.concatenate([np.full(len(baskets), sign, dtype=np.int64) for baskets, sign in parts])
    window[:] = [b for i, b in enumerate(grown) if i not in set(gone)]
    tracker.apply(BasketArrays.from_lists(changed), signs)
    return window


def expected_itemsets(window, allowed: np.ndarray, threshold: int, max_size) -> dict:
    kept = [[i for i in b if i < allowed.size and allowed[i]] for b in window]
    return frequent_itemsets(kept, threshold, max_size)


@settings(max_examples=150, deadline=None)
@given(tracker_plans(), st.booleans(), st.booleans())
def test_border_tracker_equals_brute_force_at_every_tick(plan, always_join, tiny_passes):
    """BorderTracker driven as the engine does (one apply per tick, then retarget with a
    threshold that changes between ticks): itemsets() equals the brute-force miner over the
    window restricted to the allowed items and max_size, for margins 0, 0.25 and 0.5; also
    when every changed level is rebuilt by the full Apriori join (its fallback path), and
    when the compiled pair loop and the bitmaps work through a batch in tiny passes."""
    max_size, margin, allowed, ticks = plan
    tracker, window = BorderTracker(max_size, margin), []
    with pytest.MonkeyPatch.context() as patch:
        if always_join:
            patch.setattr(BorderTracker, "_new_candidates", lambda self, below, added: None)
        if tiny_passes:
            patch.setattr(pair_table, "PAIRS_PER_PASS", 2)
            patch.setattr(bitmaps, "BASKETS_PER_PASS", 3)
        for tick in ticks:
            step_window(tracker, window, tick)
            threshold = tick[3]
            assert tracker.retarget(threshold, allowed, source_of(window))
            assert tracker.itemsets() == expected_itemsets(window, allowed, threshold, max_size)


def predicted_watch(counts, allowed, keep_above, watched):
    """The items _watch_list asks for: from a fresh table, those counted at least
    max(1, keep_above // 2); with a table, those at keep_above or watched and still there."""
    stay = counts >= max(1, keep_above // 2)
    return allowed & stay if watched is None else allowed & ((counts >= keep_above) | watched & stay)


class WatchModel:
    """Drives a tracker with a small ``max_watched`` and keeps the test's own model of its
    watched items (None: no pair table), from the window's item counts."""

    def __init__(self, max_size, margin, max_watched, allowed):
        self.tracker = BorderTracker(max_size, margin, max_watched)
        self.max_size, self.margin, self.max_watched, self.allowed = max_size, margin, max_watched, allowed
        self.watched = None
        self.seen = allowed.size  # the tracker keeps counts for every item id it has seen

    def step(self, window, tick):
        step_window(self.tracker, window, tick)
        self.seen = max([self.seen] + [i + 1 for b in tick[0] for i in b])
        self.counts = np.bincount(
            np.array([i for b in window for i in b], dtype=np.int64), minlength=self.seen
        )
        self.allowed_full = np.zeros(self.seen, dtype=bool)
        self.allowed_full[: self.allowed.size] = self.allowed
        if self.watched is not None and self.watched.size < self.seen:
            self.watched = np.concatenate([self.watched, np.zeros(self.seen - self.watched.size, dtype=bool)])

    def wanted(self, threshold, watched):
        keep_above = max(1, int(threshold * (1 - self.margin)))
        return predicted_watch(self.counts, self.allowed_full, keep_above, watched)

    def retarget(self, window, threshold) -> bool:
        """Retarget; assert it declines exactly when the watch list is too long, and that
        an accepted retarget watches the predicted items and gives the exact result."""
        wanted = self.wanted(threshold, self.watched)
        fits = self.max_size == 1 or int(wanted.sum()) <= self.max_watched
        ok = self.tracker.retarget(threshold, self.allowed, source_of(window))
        assert ok == fits
        if self.max_size != 1:
            self.watched = wanted if ok else None
        if ok:
            assert self.tracker.itemsets() == expected_itemsets(
                window, self.allowed, threshold, self.max_size
            )
            if self.max_size != 1:
                assert np.flatnonzero(self.tracker.table.watched).tolist() == np.flatnonzero(wanted).tolist()
        return ok

    def smallest_fitting_threshold(self, window) -> int:
        """The smallest threshold whose watch list from a fresh table fits."""
        return next(
            t for t in range(1, 4 * len(window) + 8) if self.wanted(t, None).sum() <= self.max_watched
        )


@settings(max_examples=150, deadline=None)
@given(tracker_plans(), st.integers(0, 6))
def test_border_tracker_declines_exactly_when_too_many_items_need_pairs(plan, max_watched):
    """With max_watched 0..6, retarget returns False exactly when more than max_watched
    allowed items would be watched (per the _watch_list rule, computed here from the
    window); after a decline, retarget at the smallest threshold that fits returns True and
    the result is exact again; every True retarget is exact."""
    max_size, margin, allowed, ticks = plan
    model, window = WatchModel(max_size, margin, max_watched, allowed), []
    for tick in ticks:
        model.step(window, tick)
        if not model.retarget(window, tick[3]):
            assert model.retarget(window, model.smallest_fitting_threshold(window))
