"""Cross-checks against general-purpose reference libraries: mlxtend's fpgrowth and
association_rules, and pyfim's FP-growth, on generated data (Quest-like and heavy-tailed item
popularity, with very large baskets mixed in)."""

from __future__ import annotations

import math
from fractions import Fraction

import fim
import pandas as pd
import pytest
from mlxtend.frequent_patterns import association_rules, fpgrowth
from mlxtend.preprocessing import TransactionEncoder

from simulations.heavy_tailed import heavy_tailed_baskets
from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.rules import RuleFilter
from stream_miner.engine.window import CountWindow
from stream_miner.simulate.quest import quest_baskets

DATASETS = {
    "quest": lambda: quest_baskets(4000, n_items=300, n_patterns=200, seed=11),
    "heavy_tailed_with_big_baskets": lambda: heavy_tailed_baskets(
        4000, n_items=800, big_basket_rate=0.003, big_basket_size=150, seed=5
    ),
}


def as_names(baskets):
    return [[f"i{item}" for item in basket] for basket in baskets]


def mlxtend_itemsets(baskets, min_count):
    encoder = TransactionEncoder()
    frame = pd.DataFrame(encoder.fit(baskets).transform(baskets), columns=encoder.columns_)
    # (c - 0.5) / N makes mlxtend's float comparison select exactly count >= c
    found = fpgrowth(frame, min_support=(min_count - 0.5) / len(baskets), use_colnames=True)
    return found, {
        tuple(sorted(s)): round(p * len(baskets)) for s, p in zip(found.itemsets, found.support, strict=False)
    }


def engine_result(baskets, window, params):
    miner = WindowMiner(CountWindow(window), batch_size=997)
    for basket in baskets:
        miner.add(basket)
    return miner.mine(params)


@pytest.mark.parametrize("dataset", DATASETS)
@pytest.mark.parametrize("support", ["0.01", "0.02", "0.05"])
def test_itemsets_equal_mlxtend_and_pyfim_over_the_last_window(dataset, support):
    stream = as_names(DATASETS[dataset]())
    window = 3000
    last = stream[-window:]
    result = engine_result(stream, window, MiningParams(min_support=Fraction(support)))
    assert result.min_count == math.ceil(Fraction(support) * window)
    _, reference = mlxtend_itemsets(last, result.min_count)
    assert result.itemsets == reference
    pyfim = {tuple(sorted(s)): c for s, c in fim.fpgrowth(last, supp=-result.min_count, report="a")}
    assert result.itemsets == pyfim
    assert len(reference) > 20  # the check is not vacuous


@pytest.mark.parametrize("dataset", DATASETS)
def test_rules_and_measures_equal_mlxtend_association_rules(dataset):
    stream = as_names(DATASETS[dataset]())
    window = 3000
    last = stream[-window:]
    params = MiningParams(min_support=Fraction("0.02"), rules=RuleFilter(min_confidence=Fraction("0.3")))
    result = engine_result(stream, window, params)
    frame, _ = mlxtend_itemsets(last, result.min_count)
    reference = association_rules(frame, num_itemsets=window, metric="confidence", min_threshold=0.3)
    expected = {
        (tuple(sorted(row.antecedents)), tuple(sorted(row.consequents))): row
        for row in reference.itertuples()
    }
    ours = {(rule.antecedent, rule.consequent): rule for rule in result.rules}
    # mlxtend compares confidence as a float; keep only rules clear of the 0.3 boundary
    boundary = {k for k, r in expected.items() if abs(r.confidence - 0.3) < 1e-9}
    assert set(ours) - boundary == set(expected) - boundary
    assert len(ours) > 5
    for key, rule in ours.items():
        row = expected[key]
        assert rule.support == pytest.approx(row.support)
        assert rule.confidence == pytest.approx(row.confidence)
        assert rule.lift == pytest.approx(row.lift)
        assert rule.leverage == pytest.approx(row.leverage)
        assert rule.conviction == pytest.approx(row.conviction) or (
            math.isinf(rule.conviction) and math.isinf(row.conviction)
        )
