"""The window miner against brute force: count and event-time windows, batching, re-ordering."""

from __future__ import annotations

import math
import random
import threading
import time
import tracemalloc
from fractions import Fraction
from itertools import combinations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from brute_force import frequent_itemsets
from stream_miner.engine import fpgrowth
from stream_miner.engine.hygiene import BasketPolicy, Oversize, Verdict
from stream_miner.engine.limits import MiningInterrupted, ResultTooLarge
from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.refresh import Refresh
from stream_miner.engine.result import MiningResult
from stream_miner.engine.rules import RuleFilter, generate_rules
from stream_miner.engine.window import CountWindow, TimeWindow

names_st = st.lists(st.sampled_from("abcdefgh"), min_size=1, max_size=6)


@settings(max_examples=80, deadline=None)
@given(
    st.lists(names_st, min_size=1, max_size=60),
    st.integers(1, 20),
    st.integers(1, 9),
    st.lists(st.integers(1, 60), min_size=1, max_size=6),
    st.integers(1, 3),
)
def test_count_window_equals_brute_force_at_every_check(stream, size, batch, checks, min_count):
    miner = WindowMiner(CountWindow(size), batch_size=batch)
    seen = []
    for i, basket in enumerate(stream, start=1):
        miner.add(basket)
        seen.append(basket)
        if i in checks or i == len(stream):
            window = seen[-size:]
            assert miner.mine(MiningParams(min_count=min_count)).itemsets == frequent_itemsets(
                window, min_count
            )
            miner.check_invariants()


@settings(max_examples=80, deadline=None)
@given(
    st.lists(st.tuples(names_st, st.integers(0, 50)), min_size=1, max_size=50),
    st.integers(1, 15),
    st.integers(1, 7),
    st.fractions(Fraction(1, 20), Fraction(1, 2)),
)
def test_time_window_equals_brute_force_with_out_of_order_times(stream, seconds, batch, support):
    miner = WindowMiner(TimeWindow(seconds), batch_size=batch)
    arrived = []
    for basket, ts in stream:
        miner.add(basket, ts=ts)
        arrived.append((basket, ts))
        newest = max(t for _, t in arrived)
        window = [b for b, t in arrived if t > newest - seconds]
        result = miner.mine(MiningParams(min_support=support))
        assert result.n_baskets == len(window)
        min_count = max(1, math.ceil(support * len(window)))
        assert result.min_count == min_count
        assert result.itemsets == frequent_itemsets(window, min_count)


@settings(max_examples=40, deadline=None)
@given(st.lists(names_st, min_size=2, max_size=80), st.integers(2, 30))
def test_restructure_keeps_results_and_reorders_by_current_frequency(stream, size):
    miner = WindowMiner(CountWindow(size), batch_size=4)
    for basket in stream:
        miner.add(basket)
    before = miner.mine(MiningParams(min_count=1)).itemsets
    miner.restructure()
    miner.check_invariants()
    assert miner.mine(MiningParams(min_count=1)).itemsets == before
    counts = {}
    for basket in stream[-size:]:
        for item in set(basket):
            counts[item] = counts.get(item, 0) + 1
    rank = miner.tree.rank
    ids = {name: miner.vocabulary.lookup(name) for name in counts}
    by_rank = sorted(counts, key=lambda name: rank[ids[name]])
    assert [counts[n] for n in by_rank] == sorted(counts.values(), reverse=True)


def test_threshold_is_compared_in_exact_integers():
    # 0.07 * 100 is 7.000000000000001 in floating point; the threshold must be exactly 7
    params = MiningParams(min_support=Fraction("0.07"))
    assert params.threshold(100) == 7
    assert MiningParams(min_support=Fraction("0.02")).threshold(3000) == 60
    assert MiningParams(min_support=Fraction(1, 3)).threshold(10) == 4  # ceil(3.33...)
    assert MiningParams(min_support=Fraction(1, 100)).threshold(0) == 1


def test_max_size_and_include_exclude_lists():
    miner = WindowMiner()
    for basket in (["a", "b", "c"], ["a", "b", "c"], ["a", "c"], ["b", "d"]):
        miner.add(basket)
    full = frequent_itemsets([["a", "b", "c"], ["a", "b", "c"], ["a", "c"], ["b", "d"]], 2)
    assert miner.mine(MiningParams(min_count=2, max_size=2)).itemsets == {
        k: v for k, v in full.items() if len(k) <= 2
    }
    only_ab = miner.mine(MiningParams(min_count=2, include=frozenset("ab"))).itemsets
    assert only_ab == {k: v for k, v in full.items() if set(k) <= {"a", "b"}}
    no_c = miner.mine(MiningParams(min_count=2, exclude=frozenset("c"))).itemsets
    assert no_c == {k: v for k, v in full.items() if "c" not in k}


def test_basket_hygiene_repeats_oversize_and_empty():
    miner = WindowMiner(policy=BasketPolicy(max_items=3, oversize=Oversize.SKIP))
    assert miner.add(["x", "x", "y"]) is Verdict.ACCEPTED
    assert miner.add(["a", "b", "c", "d"]) is Verdict.SKIPPED_OVERSIZE
    assert miner.add([]) is Verdict.SKIPPED_EMPTY
    result = miner.mine(MiningParams(min_count=1))
    assert result.n_baskets == 1 and result.itemsets[("x",)] == 1
    truncating = WindowMiner(policy=BasketPolicy(max_items=2, oversize=Oversize.TRUNCATE))
    assert truncating.add(["p", "q", "p", "r"]) is Verdict.TRUNCATED
    assert truncating.mine(MiningParams(min_count=1)).itemsets == {("p",): 1, ("q",): 1, ("p", "q"): 1}
    assert miner.verdicts[Verdict.SKIPPED_OVERSIZE] == 1 and miner.verdicts[Verdict.SKIPPED_EMPTY] == 1


def test_bad_configuration_is_refused_with_clear_errors():
    with pytest.raises(ValueError, match="exactly one"):
        MiningParams()
    with pytest.raises(ValueError, match="min support"):
        MiningParams(min_support=Fraction(0))
    with pytest.raises(ValueError, match="window size"):
        CountWindow(0)
    with pytest.raises(ValueError, match="duration"):
        TimeWindow(0)
    with pytest.raises(ValueError, match="event time"):
        WindowMiner(TimeWindow(10)).add(["a"])
    with pytest.raises(ValueError, match="max_items"):
        BasketPolicy(max_items=0)


def test_item_order_follows_a_popularity_drift_and_results_stay_exact():
    rng = random.Random(8)
    before = [
        rng.sample("abcdef", rng.randint(1, 4)) + rng.sample("uvwxyz", rng.randint(0, 1)) for _ in range(3000)
    ]
    after = [
        rng.sample("uvwxyz", rng.randint(1, 4)) + rng.sample("abcdef", rng.randint(0, 1)) for _ in range(3000)
    ]
    miner = WindowMiner(CountWindow(1000), batch_size=100)
    for basket in before:
        miner.add(basket)
    miner.flush()
    rank_before = miner.tree.rank.copy()
    for basket in after:
        miner.add(basket)
    miner.check_invariants()
    rank = miner.tree.rank
    ids = {name: miner.vocabulary.lookup(name) for name in "abcdefuvwxyz"}
    assert max(rank[ids[n]] for n in "uvwxyz") < min(rank[ids[n]] for n in "abcdef")
    assert min(rank_before[ids[n]] for n in "uvwxyz") > max(rank_before[ids[n]] for n in "abcdef")
    assert miner.mine(MiningParams(min_count=20)).itemsets == frequent_itemsets(after[-1000:], 20)


def test_a_stable_item_order_is_kept():
    rng = random.Random(9)
    miner = WindowMiner(CountWindow(500), batch_size=50)
    popularity = {"a": 0.9, "b": 0.7, "c": 0.5, "d": 0.35, "e": 0.2, "f": 0.1, "g": 0.05}
    stream = [[item for item, p in popularity.items() if rng.random() < p] or ["g"] for _ in range(4000)]
    for basket in stream[:500]:
        miner.add(basket)
    miner.flush()
    tree = miner.tree
    for basket in stream[500:]:
        miner.add(basket)
    miner.flush()
    assert miner.tree is tree  # same popularity: never rebuilt


# ------------------------------------------------------------ result caps and interrupts
def long_baskets_window() -> WindowMiner:
    """Ten copies of one basket of 32 items: at min count 1, 2^32 - 1 frequent itemsets."""
    miner = WindowMiner(CountWindow(10))
    for _ in range(10):
        miner.add([f"item{i:02}" for i in range(32)])
    return miner


@pytest.mark.parametrize("how", ["mine", "tick", "full remine"])
def test_a_combinatorial_blow_up_is_refused_before_listing(how):
    miner = long_baskets_window()
    params = MiningParams(min_count=1)
    run = {
        "mine": lambda: miner.mine(params),
        "tick": lambda: miner.tick(params),
        "full remine": lambda: miner.tick(params, refresh=Refresh.FULL),
    }[how]
    tracemalloc.start()
    try:
        with pytest.raises(ResultTooLarge) as info:
            run()
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    message = str(info.value)
    assert "\n" not in message and "4,294,967,295 itemsets" in message and "1,000,000" in message
    assert "--min-support" in message and "--max-size" in message
    assert info.value.found == 2**32 - 1 and info.value.cap == 1_000_000
    assert peak < 16 * 2**20  # counted, not listed
    small = MiningParams(min_count=1, max_size=2)
    expected = frequent_itemsets([[f"item{i:02}" for i in range(32)]] * 10, 1, 2)
    assert miner.mine(small).itemsets == expected
    tick = miner.tick(small)
    assert tick.number == 0 and tick.result.itemsets == expected  # the refused tick counted for nothing


@settings(max_examples=60, deadline=None)
@given(
    st.lists(names_st, min_size=1, max_size=40),
    st.integers(1, 30),
    st.integers(1, 3),
    st.one_of(st.none(), st.integers(1, 4)),
    st.integers(1, 80),
    st.lists(st.integers(1, 40), min_size=1, max_size=4),
)
def test_the_itemset_cap_refuses_exactly_the_results_over_it(stream, size, min_count, max_size, cap, checks):
    """Mines and ticks (incremental and full) succeed exactly when the brute-force result
    holds at most ``max_itemsets`` itemsets, and then give it."""
    miner = WindowMiner(CountWindow(size), batch_size=3)
    params = MiningParams(min_count=min_count, max_size=max_size, max_itemsets=cap)
    for i, basket in enumerate(stream, start=1):
        miner.add(basket)
        if i in checks or i == len(stream):
            expected = frequent_itemsets(stream[:i][-size:], min_count, max_size)
            for run in (miner.mine, miner.tick, lambda p: miner.tick(p, refresh=Refresh.FULL)):
                if len(expected) > cap:
                    with pytest.raises(ResultTooLarge) as info:
                        run(params)
                    assert cap < info.value.found <= len(expected)
                else:
                    result = run(params)
                    assert (
                        result if isinstance(result, MiningResult) else result.result
                    ).itemsets == expected


@settings(max_examples=60, deadline=None)
@given(st.lists(names_st, min_size=1, max_size=30), st.integers(1, 2), st.integers(1, 40))
def test_the_rule_cap_refuses_exactly_the_rule_lists_over_it(stream, min_count, cap):
    itemsets = frequent_itemsets(stream, min_count)
    passing = sum(
        1
        for itemset, count in itemsets.items()
        for size in range(1, len(itemset))
        for left in combinations(itemset, size)
        if 3 * count >= itemsets[left]  # confidence at least 1/3
    )
    miner = WindowMiner()
    for basket in stream:
        miner.add(basket)
    params = MiningParams(min_count=min_count, rules=RuleFilter(min_confidence=Fraction(1, 3), max_total=cap))
    if passing > cap:
        with pytest.raises(ResultTooLarge, match="rules"):
            miner.mine(params)
    else:
        assert len(miner.mine(params).rules) == passing


class PollWatch(threading.Event):
    """An interrupt event that also sets ``deep`` once it was polled ``polls`` times, that
    is once the mine polling it is well under way."""

    def __init__(self, polls: int) -> None:
        super().__init__()
        self.remaining = polls
        self.deep = threading.Event()

    def is_set(self) -> bool:
        self.remaining -= 1
        if self.remaining <= 0:
            self.deep.set()
        return super().is_set()


def interrupted_within(work, interrupt: PollWatch, bound: float = 5.0) -> float:
    """Run ``work`` on a thread, set ``interrupt`` once the work polled it enough, and return
    how long the work took to stop (it must raise MiningInterrupted)."""
    outcome: list[BaseException | None] = []

    def target():
        try:
            work()
            outcome.append(None)
        except BaseException as error:
            outcome.append(error)

    thread = threading.Thread(target=target, daemon=True)
    thread.start()
    try:
        assert interrupt.deep.wait(60), "the work never polled its interrupt"
    finally:
        interrupt.set()  # also when the assertion failed: the work must not run on unbounded
    began = time.monotonic()
    thread.join(60)
    stopped = time.monotonic() - began
    assert not thread.is_alive(), "the work ignored its interrupt"
    assert len(outcome) == 1 and isinstance(outcome[0], MiningInterrupted), outcome
    assert stopped < bound
    return stopped


def dense_window() -> tuple[WindowMiner, list[list[str]]]:
    """40 baskets of 24 of 28 items: far more frequent itemsets at count 2 than any test
    could list (uninterrupted, mining them takes hours)."""
    rng = random.Random(5)
    baskets = [rng.sample([f"i{k}" for k in range(28)], 24) for _ in range(40)]
    miner = WindowMiner(CountWindow(40))
    for basket in baskets:
        miner.add(basket)
    return miner, baskets


HUGE = MiningParams(min_count=2, max_itemsets=None)
MODEST = MiningParams(min_count=30, max_size=3)


@pytest.mark.parametrize("compiled", [False, True], ids=["numpy first", "compiled loop"])
def test_an_interrupted_mine_stops_promptly_and_the_miner_stays_usable(compiled):
    if compiled:
        fpgrowth.use_compiled_loop()  # as in a long run (a Kafka member loads it at start)
    miner, baskets = dense_window()
    # polled per numpy step (40-90 us) but per compiled step of about 2^20 codes (0.05-0.15 s)
    interrupt = PollWatch(5 if compiled else 300)
    interrupted_within(lambda: miner.mine(HUGE, interrupt=interrupt), interrupt)
    assert miner.mine(MODEST).itemsets == frequent_itemsets(baskets, 30, 3)


def test_an_interrupted_tick_stops_promptly_and_counts_for_nothing():
    miner, baskets = dense_window()
    interrupt = PollWatch(4)
    interrupted_within(lambda: miner.tick(HUGE, interrupt=interrupt), interrupt)
    tick = miner.tick(MODEST)
    assert tick.number == 0 and tick.result.itemsets == frequent_itemsets(baskets, 30, 3)


def test_interrupted_rule_generation_stops_promptly():
    names = [f"i{k:02}" for k in range(18)]
    # every subset of 18 items, the larger the rarer: 3^18 splits to look at, none passing
    itemsets = {subset: 2 ** (18 - size) for size in range(1, 19) for subset in combinations(names, size)}
    interrupt = PollWatch(3)
    interrupted_within(
        lambda: generate_rules(itemsets, 2**18, RuleFilter(min_confidence=1), interrupt=interrupt), interrupt
    )


# Withdrawal: a window after ``withdraw(low, high)`` must mine exactly like batch mining of
# what is left. For a count window, "what is left" is the last ``size`` baskets added minus
# the withdrawn ones (the places they held are refilled by later baskets only).
@settings(max_examples=80, deadline=None)
@given(
    st.lists(st.tuples(names_st, st.integers(0, 30)), min_size=1, max_size=60),
    st.integers(1, 25),
    st.integers(1, 9),
    st.lists(st.tuples(st.integers(1, 60), st.integers(0, 30), st.integers(0, 10)), max_size=4),
    st.booleans(),
)
def test_count_window_withdrawal_equals_brute_force(stream, size, batch, withdrawals, tick):
    miner = WindowMiner(CountWindow(size), batch_size=batch)
    window: list[tuple[list[str], int]] = []  # (basket, tag), oldest first
    at = {when: (low, low + span) for when, low, span in withdrawals}
    for i, (basket, tag) in enumerate(stream, start=1):
        miner.add(basket, tag=tag)
        window = (window + [(basket, tag)])[-size:]
        if i in at:
            low, high = at[i]
            assert miner.withdraw(low, high) == sum(low <= t < high for _, t in window)
            window = [(b, t) for b, t in window if not low <= t < high]
        expected = frequent_itemsets([b for b, _ in window], 1)
        if tick or i == len(stream):
            assert miner.tick(MiningParams(min_count=1)).result.itemsets == expected
        miner.check_invariants()


@settings(max_examples=60, deadline=None)
@given(
    st.lists(st.tuples(names_st, st.integers(0, 40), st.integers(0, 20)), min_size=1, max_size=50),
    st.integers(1, 15),
    st.integers(1, 7),
    st.lists(st.tuples(st.integers(1, 50), st.integers(0, 20), st.integers(0, 8)), max_size=4),
)
def test_time_window_withdrawal_equals_brute_force(stream, seconds, batch, withdrawals):
    miner = WindowMiner(TimeWindow(seconds), batch_size=batch)
    arrived: list[tuple[list[str], int, int]] = []
    at = {when: (low, low + span) for when, low, span in withdrawals}
    for i, (basket, ts, tag) in enumerate(stream, start=1):
        miner.add(basket, ts=ts, tag=tag)
        arrived.append((basket, ts, tag))
        if i in at:
            low, high = at[i]
            miner.withdraw(low, high)
            arrived = [(b, t, g) for b, t, g in arrived if not low <= g < high]
        newest = max(t for _, t, _ in stream[:i])
        window = [b for b, t, _ in arrived if t > newest - seconds]
        assert miner.tick(MiningParams(min_count=1)).result.itemsets == frequent_itemsets(window, 1)


def test_origin_tags_are_checked():
    miner = WindowMiner(CountWindow(5))
    for bad in (-1, True, 1.5, "3"):
        with pytest.raises(ValueError, match="origin tag"):
            miner.add(["a"], tag=bad)
    assert len(miner) == 0


def test_withdrawal_leaves_alone_what_buffered_baskets_push_out():
    """A stored basket that a buffered one is about to push out of a count window is not in
    the window any more, so withdrawing its tag takes back only the buffered one."""
    miner = WindowMiner(CountWindow(1), batch_size=2)
    miner.add(["a"], tag=0)
    miner.flush()
    miner.add(["a"], tag=0)
    assert miner.withdraw(0, 1) == 1
    assert len(miner) == 0 and miner.mine(MiningParams(min_count=1)).itemsets == {}
