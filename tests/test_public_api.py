"""The public API: what ``stream_miner`` exports, and the checks and exact conversions done
when its objects are built or fed (every refusal a one-line ValueError naming the value)."""

from __future__ import annotations

import math
from decimal import Decimal
from fractions import Fraction
from itertools import combinations

import numpy as np
import pytest

import stream_miner
from brute_force import frequent_itemsets
from stream_miner import MiningParams, RuleFilter, Verdict, WindowMiner

PUBLIC = {
    "WindowMiner",
    "Tick",
    "MinerState",
    "MiningParams",
    "RuleFilter",
    "Rule",
    "CountWindow",
    "TimeWindow",
    "BasketPolicy",
    "Oversize",
    "Verdict",
    "MiningResult",
    "ResultDelta",
    "save_checkpoint",
    "load_checkpoint",
    "CheckpointError",
    "ResultTooLarge",
    "MiningInterrupted",
    "DriftDetector",
    "DriftSettings",
    "DriftEvent",
    "__version__",
}


def refused(match: str, build) -> str:
    with pytest.raises(ValueError, match=match) as info:
        build()
    message = str(info.value)
    assert "\n" not in message
    return message


# ------------------------------------------------------------------------- exports
def test_everything_public_is_exported_and_importable():
    assert set(stream_miner.__all__) == PUBLIC
    namespace: dict = {}
    exec("from stream_miner import *", namespace)
    assert set(namespace) >= PUBLIC
    assert all(getattr(stream_miner, name) is namespace[name] for name in PUBLIC)
    assert issubclass(stream_miner.ResultTooLarge, ValueError)
    assert isinstance(stream_miner.__version__, str) and stream_miner.__version__.count(".") == 2


# ------------------------------------------------------------------- min support
@pytest.mark.parametrize(
    "given", [0.07, "0.07", " 7/100 ", Decimal("0.07"), Fraction(7, 100), np.float64(0.07)]
)
def test_min_support_converts_exactly(given):
    params = MiningParams(min_support=given)
    assert params.min_support == Fraction(7, 100) and type(params.min_support) is Fraction
    assert params.threshold(100) == 7  # 0.07 * 100 is 7.000000000000001 in floats
    assert params.threshold(3000) == 210


def test_whole_window_support_and_count_forms():
    assert MiningParams(min_support=1).min_support == Fraction(1)
    assert MiningParams(min_support="1e-2").threshold(1000) == 10
    params = MiningParams(min_count=np.int64(3))
    assert params.min_count == 3 and type(params.min_count) is int


@pytest.mark.parametrize(
    "given, match",
    [
        (True, "min_support.*bool"),
        (math.nan, "min_support.*finite"),
        (math.inf, "min_support.*finite"),
        (Decimal("NaN"), "min_support.*finite"),
        (0, r"min_support.*\(0, 1\]"),
        (-0.1, r"min_support.*\(0, 1\]"),
        (1.5, r"min_support.*\(0, 1\]"),
        ("seven percent", "min_support.*0.07 or 7/100"),
        ("1/0", "min_support"),
        ([0.1], "min_support.*list"),
    ],
)
def test_bad_min_support_is_refused(given, match):
    refused(match, lambda: MiningParams(min_support=given))


@pytest.mark.parametrize("given", [True, 2.0, 0, -3, "3", None])
def test_bad_min_count_is_refused(given):
    build = (lambda: MiningParams()) if given is None else (lambda: MiningParams(min_count=given))
    refused("min_count" if given is not None else "exactly one", build)


@pytest.mark.parametrize("name", ["max_size", "max_itemsets"])
@pytest.mark.parametrize("given", [0, 1.5, True, "2"])
def test_bad_whole_numbers_are_refused(name, given):
    refused(name, lambda: MiningParams(min_count=1, **{name: given}))


def test_the_length_limit_has_our_own_name():
    assert MiningParams(min_count=1, max_size=2).max_size == 2
    with pytest.raises(TypeError):
        MiningParams(min_count=1, max_len=2)  # type: ignore[call-arg]


# --------------------------------------------------------------------- item lists
@pytest.mark.parametrize("given", [["a", "b"], ("a", "b"), {"a", "b"}, (n for n in "ab"), frozenset("ab")])
def test_item_lists_accept_any_iterable_of_names(given):
    params = MiningParams(min_count=1, include=given)
    assert params.include == frozenset({"a", "b"}) and type(params.include) is frozenset
    assert MiningParams(min_count=1, exclude=list("ab")).exclude == frozenset({"a", "b"})


@pytest.mark.parametrize("name", ["include", "exclude"])
def test_bad_item_lists_are_refused(name):
    assert "not a string" in refused(name, lambda: MiningParams(min_count=1, **{name: "milk"}))
    refused(f"{name}.*int", lambda: MiningParams(min_count=1, **{name: ["milk", 7]}))
    refused(f"{name}.*int", lambda: MiningParams(min_count=1, **{name: 7}))


def test_item_lists_restrict_the_result():
    baskets = [["oat", "fig", "rye"], ["oat", "fig"], ["fig", "rye"], ["oat", "rye"]]
    miner = WindowMiner()
    for basket in baskets:
        miner.add(basket)
    full = frequent_itemsets(baskets, 1)
    only = miner.mine(MiningParams(min_count=1, include=["oat", "fig"])).itemsets
    assert only == {k: v for k, v in full.items() if set(k) <= {"oat", "fig"}}
    without = miner.mine(MiningParams(min_count=1, exclude=("rye",))).itemsets
    assert without == {k: v for k, v in full.items() if "rye" not in k}


# ---------------------------------------------------------------------- rule filter
def test_rule_filter_converts_exactly_and_a_float_confidence_mines():
    rule_filter = RuleFilter(min_confidence=0.6, min_lift="6/5", antecedent_items=["oat"])
    assert rule_filter.min_confidence == Fraction(3, 5) and rule_filter.min_lift == Fraction(6, 5)
    assert rule_filter.antecedent_items == frozenset({"oat"})

    baskets = [["oat", "fig"], ["oat", "fig"], ["oat", "fig", "rye"], ["oat", "rye"], ["oat"], ["fig"]]
    miner = WindowMiner()
    for basket in baskets:
        miner.add(basket)
    result = miner.mine(MiningParams(min_count=1, rules=RuleFilter(min_confidence=0.6)))
    itemsets = frequent_itemsets(baskets, 1)
    expected = {
        (left, tuple(i for i in itemset if i not in left))
        for itemset, count in itemsets.items()
        for size in range(1, len(itemset))
        for left in combinations(itemset, size)
        if Fraction(count, itemsets[left]) >= Fraction(3, 5)
    }
    assert {(r.antecedent, r.consequent) for r in result.rules} == expected
    assert (("oat",), ("fig",)) in expected  # 3 of the 5 oat baskets: exactly the bound
    for rule in result.rules:
        assert all(isinstance(name, str) for name in rule.antecedent + rule.consequent)
        assert list(rule.antecedent) == sorted(rule.antecedent)
        assert rule.count == itemsets[tuple(sorted(rule.antecedent + rule.consequent))]


@pytest.mark.parametrize(
    "field, given, match",
    [
        ("min_confidence", 1.5, r"min_confidence.*\[0, 1\]"),
        ("min_confidence", -0.1, r"min_confidence.*\[0, 1\]"),
        ("min_confidence", True, "min_confidence.*bool"),
        ("min_confidence", math.nan, "min_confidence.*finite"),
        ("min_lift", -1, r"min_lift.*\[0, inf\)"),
        ("min_lift", "lots", "min_lift"),
        ("max_rules", 0, "max_rules.*at least 1"),
        ("max_rules", 2.5, "max_rules.*whole number"),
        ("max_antecedent", True, "max_antecedent.*whole number"),
        ("max_consequent", 0, "max_consequent"),
        ("max_total", 0, "max_total"),
        ("antecedent_items", "oat", "antecedent_items.*not a string"),
        ("consequent_items", [1], "consequent_items.*int"),
        ("rank_by", "fame", "unknown measure"),
    ],
)
def test_bad_rule_filters_are_refused(field, given, match):
    refused(match, lambda: RuleFilter(**{field: given}))


def test_rules_must_be_a_rule_filter():
    refused("rules must be a RuleFilter", lambda: MiningParams(min_count=1, rules={"min_confidence": 0.5}))


# ----------------------------------------------------------------------- baskets
@pytest.mark.parametrize("basket", ["abc", b"abc", bytearray(b"abc")])
def test_a_string_basket_is_refused(basket):
    miner = WindowMiner()
    assert "not a string" in refused("a basket is a list of item names", lambda: miner.add(basket))
    assert len(miner) == 0 and len(miner.vocabulary) == 0


@pytest.mark.parametrize(
    "bad, type_name", [(7, "int"), (None, "NoneType"), (("a",), "tuple"), (b"x", "bytes")]
)
def test_an_item_that_is_not_a_str_is_refused_and_changes_nothing(bad, type_name):
    miner = WindowMiner()
    miner.add(["tea"])
    refused(f"item name must be a str, not {type_name}", lambda: miner.add(["new", bad, "tea"]))
    refused("basket is a list of item names, not int", lambda: miner.add(5))  # type: ignore[arg-type]
    assert miner.vocabulary.names() == ["tea"] and len(miner) == 1
    assert sum(miner.verdicts.values()) == 1


def test_any_iterable_of_names_is_a_basket():
    miner = WindowMiner()
    assert miner.add(name for name in ("tea", "jam")) is Verdict.ACCEPTED
    assert miner.add({"tea"}) is Verdict.ACCEPTED
    assert miner.mine(MiningParams(min_count=2)).itemsets == {("tea",): 2}


@pytest.mark.parametrize("ts", [math.nan, math.inf, -math.inf, "12", True])
def test_bad_event_times_are_refused(ts):
    miner = WindowMiner(stream_miner.TimeWindow(10))
    refused("event time", lambda: miner.add(["tea"], ts=ts))
    refused("event time", lambda: miner.advance_time(ts))
    assert len(miner) == 0


def test_event_times_of_any_real_type_are_accepted():
    miner = WindowMiner(stream_miner.TimeWindow(10))
    for ts in (1, 2.5, np.float32(3), np.int64(4), Fraction(9, 2), Decimal("5")):
        assert miner.add(["tea"], ts=ts) is Verdict.ACCEPTED  # type: ignore[arg-type]
    assert miner.mine(MiningParams(min_count=1)).itemsets == {("tea",): 6}
