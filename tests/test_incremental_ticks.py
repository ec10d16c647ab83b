"""Incremental ticks: at every tick the incremental result equals a full re-mine and the
brute-force miner, and the delta equals the difference of consecutive results."""

from __future__ import annotations

import math
from fractions import Fraction

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from brute_force import frequent_itemsets
from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.refresh import Refresh
from stream_miner.engine.rules import RuleFilter
from stream_miner.engine.window import CountWindow, TimeWindow

names_st = st.lists(st.sampled_from("abcdefghijk"), min_size=1, max_size=7)
params_st = st.builds(
    MiningParams,
    min_support=st.fractions(Fraction(1, 30), Fraction(1, 2)),
    max_size=st.one_of(st.none(), st.integers(1, 4)),
    exclude=st.frozensets(st.sampled_from("abcdefghijk"), max_size=2),
    rules=st.one_of(st.none(), st.just(RuleFilter(min_confidence=Fraction(1, 3)))),
)


def restricted(itemsets, params):
    return {
        k: v
        for k, v in itemsets.items()
        if not set(k) & params.exclude and (params.max_size is None or len(k) <= params.max_size)
    }


def check_tick(tick, full, window, params, previous):
    """``tick`` against brute force and against ``full`` (a full mine; None: brute force only,
    so that nothing but the ticks reads the miner's tree)."""
    min_count = max(1, math.ceil(params.min_support * len(window)))
    expected = restricted(frequent_itemsets(window, min_count), params)
    full = full or tick.result
    assert tick.result.itemsets == full.itemsets == expected
    assert {(r.antecedent, r.consequent): r for r in full.rules} == {
        (r.antecedent, r.consequent): r for r in tick.result.rules
    }
    old = {} if previous is None else previous.itemsets
    new = tick.result.itemsets
    assert tick.delta.added == {k: v for k, v in new.items() if k not in old}
    assert tick.delta.removed == {k: v for k, v in old.items() if k not in new}
    assert tick.delta.changed == {k: (old[k], v) for k, v in new.items() if k in old and old[k] != v}
    old_rules = set() if previous is None else {(r.antecedent, r.consequent) for r in previous.rules}
    new_rules = {(r.antecedent, r.consequent) for r in tick.result.rules}
    assert set(tick.delta.rules_added) == new_rules - old_rules
    assert set(tick.delta.rules_removed) == old_rules - new_rules


modes_st = st.lists(st.sampled_from(list(Refresh)), min_size=1, max_size=4)  # cycled, one a tick


@pytest.mark.parametrize("mine_too", [True, False])
@settings(max_examples=120, deadline=None)
@given(
    st.lists(st.tuples(names_st, st.booleans()), min_size=1, max_size=90),
    st.integers(1, 30),
    st.integers(1, 9),
    st.lists(params_st, min_size=1, max_size=3),
    modes_st,
)
def test_count_window_ticks_equal_full_remine_and_brute_force(
    mine_too, stream, size, batch, param_cycle, modes
):
    """Every refresh mode, switching between them (the tree left behind by tracked ticks is
    rebuilt for a full one), with and without full mines in between."""
    incremental = WindowMiner(CountWindow(size), batch_size=batch)
    seen, previous, ticks = [], None, 0
    for basket, tick_now in stream:
        incremental.add(basket)
        seen.append(basket)
        if tick_now:
            params = param_cycle[ticks % len(param_cycle)]
            tick = incremental.tick(params, refresh=modes[ticks % len(modes)])
            assert tick.number == ticks
            full = incremental.mine(params) if mine_too else None
            check_tick(tick, full, seen[-size:], params, previous)
            previous, ticks = tick.result, ticks + 1
    incremental.check_invariants()


@settings(max_examples=120, deadline=None)
@given(
    st.lists(st.tuples(names_st, st.integers(0, 60), st.booleans()), min_size=1, max_size=80),
    st.integers(1, 20),
    st.integers(1, 6),
    params_st,
    modes_st,
)
def test_time_window_ticks_stay_exact_as_the_window_and_threshold_change(
    stream, seconds, batch, params, modes
):
    incremental = WindowMiner(TimeWindow(seconds), batch_size=batch)
    arrived, previous = [], None
    for basket, ts, tick_now in stream:
        incremental.add(basket, ts=ts)
        arrived.append((basket, ts))
        if tick_now:
            newest = max(t for _, t in arrived)
            window = [b for b, t in arrived if t > newest - seconds]
            tick = incremental.tick(params, refresh=modes[len(arrived) % len(modes)])
            check_tick(tick, None, window, params, previous)
            previous = tick.result
    incremental.check_invariants()


def test_full_remine_ticks_give_the_same_results_and_deltas():
    stream = [["a", "b"], ["a", "c"], ["b", "c", "d"], ["a", "b", "d"], ["c"], ["a", "b"]] * 7
    params = MiningParams(min_count=3, rules=RuleFilter())
    fast, full = WindowMiner(CountWindow(10), batch_size=3), WindowMiner(CountWindow(10), batch_size=3)
    for i, basket in enumerate(stream, start=1):
        fast.add(basket)
        full.add(basket)
        if i % 4 == 0:
            a, b = fast.tick(params, refresh=Refresh.TRACKED), full.tick(params, refresh=Refresh.FULL)
            assert a.result.itemsets == b.result.itemsets
            assert a.delta == b.delta


def test_a_last_tick_never_starts_the_tracking_but_keeps_a_running_tracker():
    """At a run's stop (``last``) a start of the tracking cannot pay off: the adaptive tick
    mines in full instead, with the same result; a tracker already running serves it."""
    stream = [["a", "b"], ["a", "c"], ["b", "c", "d"], ["a", "b", "d"], ["c"], ["a", "b"]] * 5
    params = MiningParams(min_count=3, rules=RuleFilter())
    miners = [WindowMiner(CountWindow(10), batch_size=3) for _ in range(3)]
    for miner in miners:
        for basket in stream:
            miner.add(basket)
        miner.tick(params)  # a full mine measured: the chooser knows what a start costs
        miner._chooser.credit = math.inf  # the next adaptive tick would start the tracking
    stopping, going_on, tracking = miners
    tracking.tick(params, refresh=Refresh.TRACKED)
    last = stopping.tick(params, last=True)
    assert stopping._tracker is None
    assert going_on.tick(params).result.itemsets == last.result.itemsets
    assert going_on._tracker is not None
    tracking._chooser.credit = 0.0
    tracking._chooser.full = math.inf  # however slow its tick, the tracker stays
    assert tracking.tick(params, last=True).result.itemsets == last.result.itemsets
    assert tracking._tracker is not None
