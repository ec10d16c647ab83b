"""Rules from splits checked with numpy: the same rules, counts and order as a plain loop over
every split, whichever way a size's splits are blocked, with exact thresholds (also past int64)."""

from __future__ import annotations

import threading
from fractions import Fraction
from itertools import combinations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from brute_force import frequent_itemsets
from stream_miner.engine import rule_splits
from stream_miner.engine.limits import MiningInterrupted, ResultTooLarge
from stream_miner.engine.rule_splits import SplitFilter, passing_splits
from stream_miner.engine.rules import RuleFilter, generate_rules

NAMES = ["apricot", "bap", "chard", "damson", "endive", "fennel", "gherkin", "hummus", "icing"]
baskets_st = st.lists(
    st.lists(st.sampled_from(NAMES), min_size=1, max_size=8, unique=True), min_size=1, max_size=30
)
fractions_st = st.one_of(
    st.fractions(0, 1, max_denominator=20),
    st.just(Fraction(1, 3) + Fraction(1, 10**30)),
    st.just(Fraction(0)),
)
lifts_st = st.one_of(st.none(), st.fractions(0, 3, max_denominator=20), st.just(Fraction(10**25 + 1, 10**25)))
sides_st = st.one_of(st.none(), st.sets(st.sampled_from(NAMES), min_size=1))


def plain_rules(itemsets: dict, n: int, f: RuleFilter) -> list[tuple]:
    """Every split of every itemset, in order, checked with Fractions."""
    out = []
    for itemset, count in itemsets.items():
        for k in range(1, len(itemset)):
            if (f.max_antecedent is not None and k > f.max_antecedent) or (
                f.max_consequent is not None and len(itemset) - k > f.max_consequent
            ):
                continue
            for ante in combinations(itemset, k):
                cons = tuple(i for i in itemset if i not in ante)
                if f.antecedent_items is not None and not set(ante) <= set(f.antecedent_items):
                    continue
                if f.consequent_items is not None and not set(cons) <= set(f.consequent_items):
                    continue
                n_a, n_c = itemsets[ante], itemsets[cons]
                if Fraction(count, n_a) < f.min_confidence:
                    continue
                if f.min_lift is not None and Fraction(count * n, n_a * n_c) < f.min_lift:
                    continue
                out.append((ante, cons, count, n_a, n_c))
    return out


def named_itemsets(baskets: list[list[str]], min_count: int) -> dict:
    found = frequent_itemsets(baskets, min_count)
    return {key: found[key] for key in sorted(found, key=lambda k: (len(k), k[::-1]))}  # any order


def uncapped_filter(confidence, lift, max_a, max_c, left, right) -> RuleFilter:
    """A rule filter of every kind of restriction drawn, with no cap on the rules."""
    return RuleFilter(
        min_confidence=confidence,
        min_lift=lift,
        max_antecedent=max_a,
        max_consequent=max_c,
        antecedent_items=left,
        consequent_items=right,
        max_total=None,
    )


@settings(max_examples=200, deadline=None)
@given(
    baskets_st,
    st.integers(1, 4),
    fractions_st,
    lifts_st,
    st.one_of(st.none(), st.integers(1, 3)),
    st.one_of(st.none(), st.integers(1, 3)),
    sides_st,
    sides_st,
)
def test_rules_match_a_plain_loop_in_order(baskets, min_count, confidence, lift, max_a, max_c, left, right):
    itemsets = named_itemsets(baskets, min_count)
    f = uncapped_filter(confidence, lift, max_a, max_c, left, right)
    found = [
        (r.antecedent, r.consequent, r.count, r.antecedent_count, r.consequent_count)
        for r in generate_rules(itemsets, len(baskets), f)
    ]
    assert found == plain_rules(itemsets, len(baskets), f)


def test_past_the_cap_and_when_interrupted() -> None:
    baskets = [NAMES[:6]] * 3 + [NAMES[2:8]] * 2
    itemsets = named_itemsets(baskets, 2)
    every = len(plain_rules(itemsets, len(baskets), RuleFilter()))
    assert len(generate_rules(itemsets, len(baskets), RuleFilter(max_total=every))) == every
    with pytest.raises(ResultTooLarge):
        generate_rules(itemsets, len(baskets), RuleFilter(max_total=every - 1))
    stop = threading.Event()
    stop.set()
    with pytest.raises(MiningInterrupted):
        generate_rules(itemsets, len(baskets), RuleFilter(), interrupt=stop)


def split_filter(f: RuleFilter) -> SplitFilter:
    return SplitFilter(
        min_confidence=f.min_confidence,
        min_lift=f.min_lift,
        max_antecedent=f.max_antecedent,
        max_consequent=f.max_consequent,
        antecedent_items=f.antecedent_items,
        consequent_items=f.consequent_items,
        max_total=f.max_total,
    )


def both_ways(itemsets: dict, n: int, f: RuleFilter) -> list[list[list[int]]]:
    """The splits listed with numpy and with the compiled loop: both must be equal."""
    keys, counts = list(itemsets), np.array(list(itemsets.values()), dtype=np.int64)
    ways = [passing_splits(keys, counts, n, split_filter(f), None, compiled=c) for c in (False, True)]
    return [[column.tolist() for column in way] for way in ways]


@settings(max_examples=200, deadline=None)
@given(
    baskets_st,
    st.integers(1, 4),
    st.fractions(0, 1, max_denominator=20),
    st.one_of(st.none(), st.fractions(0, 3, max_denominator=20)),
    st.one_of(st.none(), st.integers(1, 3)),
    st.one_of(st.none(), st.integers(1, 3)),
    sides_st,
    sides_st,
)
def test_the_compiled_loop_lists_the_same_splits(baskets, min_count, conf, lift, max_a, max_c, left, right):
    f = uncapped_filter(conf, lift, max_a, max_c, left, right)
    numpy_way, compiled_way = both_ways(named_itemsets(baskets, min_count), len(baskets), f)
    assert compiled_way == numpy_way


@settings(max_examples=150, deadline=None)
@given(
    st.lists(st.integers(2, len(NAMES)), min_size=1, max_size=12),
    baskets_st,
    st.fractions(Fraction(1, 2), 1, max_denominator=12),
    st.one_of(st.none(), st.integers(1, 4)),
)
def test_the_compiled_loop_keeps_every_confident_split_of_nested_baskets(prefixes, noise, conf, max_c):
    """Nested baskets (prefixes of one list) make long chains of confident antecedents, where
    the loop skips the antecedents below an unconfident one: none of the skipped may pass."""
    baskets = [NAMES[:k] for k in prefixes] + noise
    itemsets = named_itemsets(baskets, 2)
    f = RuleFilter(min_confidence=conf, max_consequent=max_c, max_total=None)
    keys, counts = list(itemsets), np.array(list(itemsets.values()), dtype=np.int64)
    compiled = passing_splits(keys, counts, len(baskets), split_filter(f), None, compiled=True)
    found = [
        (keys[a], keys[c], int(counts[x]), int(counts[a]), int(counts[c]))
        for x, a, c in zip(*(column.tolist() for column in compiled), strict=True)
    ]
    assert found == plain_rules(itemsets, len(baskets), f)


def test_the_compiled_loop_grows_its_output_pauses_and_stops(monkeypatch):
    """Thousands of rules (the output grows from 1,024 rows), a few itemsets per call, the
    cap and the interrupt checked between calls."""
    monkeypatch.setattr(rule_splits, "KERNEL_ITEMSETS", 7)
    baskets = [NAMES] * 3 + [NAMES[:5]] * 2
    itemsets = named_itemsets(baskets, 2)
    numpy_way, compiled_way = both_ways(itemsets, len(baskets), RuleFilter(max_total=None))
    assert compiled_way == numpy_way and len(numpy_way[0]) == 3**9 - 2**10 + 1
    keys, counts = list(itemsets), np.array(list(itemsets.values()), dtype=np.int64)
    with pytest.raises(ResultTooLarge):
        passing_splits(keys, counts, 5, split_filter(RuleFilter(max_total=1000)), None, compiled=True)
    stop = threading.Event()
    stop.set()
    with pytest.raises(MiningInterrupted):
        passing_splits(keys, counts, 5, split_filter(RuleFilter()), stop, compiled=True)


def test_the_compiled_loop_refuses_itemsets_missing_a_subset():
    keys = [("a",), ("b",), ("c",), ("a", "b"), ("a", "b", "c")]  # no ("a", "c") nor ("b", "c")
    with pytest.raises(ValueError, match="downward closed"):
        passing_splits(keys, np.array([3, 3, 3, 2, 2]), 4, split_filter(RuleFilter()), None, compiled=True)


@pytest.mark.parametrize(
    "names",
    [["", "a", "ab", "b", "é", "\ud800", "日本"], ["a", "a\0b", "b", "\0"]],
    ids=["odd names", "names with a zero"],
)
def test_the_compiled_loop_reads_any_item_names(names):
    """Item names go to the loop joined by zero bytes (or one by one when a name holds one)."""
    baskets = [names, names[:3], names[1:], names[::2], names[1::2]] * 2
    itemsets = named_itemsets(baskets, 2)
    f = RuleFilter(min_confidence=Fraction(1, 2), max_total=None)
    keys, counts = list(itemsets), np.array(list(itemsets.values()), dtype=np.int64)
    compiled = passing_splits(keys, counts, len(baskets), split_filter(f), None, compiled=True)
    found = [
        (keys[a], keys[c], int(counts[x]), int(counts[a]), int(counts[c]))
        for x, a, c in zip(*(column.tolist() for column in compiled), strict=True)
    ]
    assert found == plain_rules(itemsets, len(baskets), f) and len(found) > 10
