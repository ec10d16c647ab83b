"""Rules held as columns (RuleSet): a drop-in Sequence of Rule, with the same measures (the same
floats), the same orders and selections, deltas and output as plain per-rule Python code."""

from __future__ import annotations

import io
import json
import math
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from brute_force import frequent_itemsets
from stream_miner.cli.output import json_lines, write_table
from stream_miner.engine.delta import diff_results
from stream_miner.engine.result import MiningResult
from stream_miner.engine.rule_set import RuleSet
from stream_miner.engine.rules import RANK_MEASURES, Rule, RuleFilter, generate_rules

NAMES = ["apricot", "bap", "chard", 'dam"son', "endive", "fennel", "gâteau", "hummus"]
baskets_st = st.lists(
    st.lists(st.sampled_from(NAMES), min_size=1, max_size=7, unique=True), min_size=1, max_size=25
)


def result_of(baskets: list[list[str]], min_count: int, f: RuleFilter) -> MiningResult:
    itemsets = frequent_itemsets(baskets, min_count)
    itemsets = {k: itemsets[k] for k in sorted(itemsets, key=lambda k: (len(k), k[::-1]))}  # any order
    n = len(baskets)
    return MiningResult(n, min_count, itemsets, generate_rules(itemsets, n, f))


def plain_json(result: MiningResult, tick: int | None) -> list[str]:
    """The lines as written before rules were columns: one dict per itemset and rule, json.dumps."""
    extra = {} if tick is None else {"tick": tick}
    n = result.n_baskets
    lines = []
    for items, count in sorted(result.itemsets.items(), key=lambda kv: (len(kv[0]), kv[0])):
        record = {"type": "itemset", "items": list(items), "count": count, "support": count / n}
        lines.append(json.dumps(record | extra, ensure_ascii=False))
    for r in sorted(result.rules, key=lambda r: (r.antecedent, r.consequent)):
        record = {
            "type": "rule",
            "antecedent": list(r.antecedent),
            "consequent": list(r.consequent),
            "count": r.count,
            "support": r.support,
            "confidence": r.confidence,
            "lift": r.lift,
            "leverage": r.leverage,
            "conviction": None if math.isinf(r.conviction) else r.conviction,
        }
        lines.append(json.dumps(record | extra, ensure_ascii=False))
    return lines


@settings(max_examples=150, deadline=None)
@given(baskets_st, st.integers(1, 4), st.fractions(0, 1, max_denominator=10), st.integers(1, 6))
def test_columns_are_a_drop_in_sequence_of_rules(baskets, min_count, confidence, limit):
    result = result_of(baskets, min_count, RuleFilter(min_confidence=confidence))
    rules = result.rules
    assert isinstance(rules, RuleSet)
    plain = list(rules)
    assert len(rules) == len(plain) and all(isinstance(r, Rule) for r in plain)
    assert rules == plain and plain == rules and rules == RuleSet.of(plain, result.n_baskets)
    assert [rules[i] for i in range(len(rules))] == plain and rules[-1:] == plain[-1:]
    assert rules[1:4] == plain[1:4] and (rules != plain[:-1] if plain else rules == [])
    for name in RANK_MEASURES:  # bit for bit the floats of the Rule properties
        assert rules.measure(name).tolist() == [r.measure(name) for r in plain]
        best = sorted(plain, key=lambda r: (-r.measure(name), -r.count, r.antecedent, r.consequent))[:limit]
        best = best if len(plain) > limit else plain  # all kept: in mining order
        ranked = RuleFilter(min_confidence=confidence, max_rules=limit, rank_by=name)
        assert list(generate_rules(result.itemsets, result.n_baskets, ranked)) == best
    for tick in (None, 7):
        assert json_lines(result, tick) == plain_json(result, tick)


def test_measures_past_exact_float_products_are_computed_rule_by_rule():
    n = 2**27  # n * n is past 2**53: counts products are no longer exact in float64
    itemsets = {("a",): n - 3, ("b",): n - 5, ("a", "b"): n - 7}
    rules = generate_rules(itemsets, n, RuleFilter())
    for name in RANK_MEASURES:
        assert rules.measure(name).tolist() == [r.measure(name) for r in rules]
    with pytest.raises(ValueError, match="unknown measure"):
        rules.measure("surprise")


def test_table_lists_rules_by_confidence_then_lift_then_names():
    baskets = [["apricot", "bap", "chard"], ["apricot", "bap"], ["bap", "chard"], ["apricot"]] * 3
    result = result_of(baskets, 2, RuleFilter())
    out = io.StringIO()
    write_table(result, out, show_rules=True)
    listed = [line.split("  ")[1].strip() for line in out.getvalue().splitlines() if " -> " in line]
    plain = sorted(result.rules, key=lambda r: (-r.confidence, -r.lift, r.antecedent, r.consequent))
    assert listed == [f"{' + '.join(r.antecedent)} -> {' + '.join(r.consequent)}" for r in plain]
    assert len(listed) == len(result.rules) > 3


@settings(max_examples=150, deadline=None)
@given(baskets_st, baskets_st, st.integers(1, 3), st.booleans(), st.booleans())
def test_delta_matches_dicts_of_rules(first, second, min_count, before_as_list, after_as_list):
    f = RuleFilter(min_confidence=Fraction(1, 3))
    before, after = result_of(first, min_count, f), result_of(second + first, min_count, f)
    if before_as_list:  # a result given with a plain list of rules (as a checkpoint loads one)
        before = MiningResult(before.n_baskets, before.min_count, before.itemsets, list(before.rules))
    if after_as_list:
        after = MiningResult(after.n_baskets, after.min_count, after.itemsets, list(after.rules))
    old = {(r.antecedent, r.consequent): r for r in before.rules}
    new = {(r.antecedent, r.consequent): r for r in after.rules}
    delta = diff_results(before, after)
    assert list(delta.rules_added.items()) == [(k, r) for k, r in new.items() if k not in old]
    assert list(delta.rules_removed.items()) == [(k, r) for k, r in old.items() if k not in new]
    changed = [(k, (old[k], r)) for k, r in new.items() if k in old and old[k] != r]
    assert list(delta.rules_changed.items()) == changed
    assert delta.rules_changed == dict(changed) and len(delta.rules_changed) == len(changed)
    first_delta = diff_results(None, after)
    assert dict(first_delta.rules_added) == new and not first_delta.rules_removed


def test_sides_of_a_mined_rule_set_index_the_itemsets():
    baskets = [["apricot", "bap", "chard"], ["apricot", "bap"], ["bap", "chard"]] * 2
    result = result_of(baskets, 2, RuleFilter())
    rules = result.rules
    assert isinstance(rules, RuleSet) and list(rules.sides) == list(result.itemsets)
    counts = np.array(list(result.itemsets.values()))
    assert (counts[rules.antecedent] == rules.antecedent_counts).all()
    assert (counts[rules.consequent] == rules.consequent_counts).all()
