"""Published worked examples, mined through the window engine.

Values are from the named textbooks and papers, recalled from memory (not re-checked against
the printed originals); derived measures follow the standard formulas.
"""

from __future__ import annotations

import math

import pytest

from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.rules import RuleFilter
from stream_miner.engine.window import CountWindow


def mine(baskets, min_count, window=None, rules=False):
    miner = WindowMiner(CountWindow(window) if window else None)
    for basket in baskets:
        miner.add(basket)
    params = MiningParams(min_count=min_count, rules=RuleFilter() if rules else None)
    result = miner.mine(params)
    by_sides = {(rule.antecedent, rule.consequent): rule for rule in result.rules}
    return result, by_sides


def test_agrawal_srikant_1994_example():
    # Agrawal & Srikant, "Fast Algorithms for Mining Association Rules", VLDB 1994 (from memory)
    baskets = [["1", "3", "4"], ["2", "3", "5"], ["1", "2", "3", "5"], ["2", "5"]]
    result, rules = mine(baskets, min_count=2, rules=True)
    assert result.itemsets == {
        ("1",): 2,
        ("2",): 3,
        ("3",): 3,
        ("5",): 3,
        ("1", "3"): 2,
        ("2", "3"): 2,
        ("2", "5"): 3,
        ("3", "5"): 2,
        ("2", "3", "5"): 2,
    }
    rule = rules[(("2", "3"), ("5",))]
    assert rule.support == 0.5 and rule.confidence == 1.0
    assert rule.lift == pytest.approx(4 / 3) and rule.leverage == pytest.approx(0.125)
    assert math.isinf(rule.conviction)
    rule = rules[(("2",), ("3",))]
    assert rule.confidence == pytest.approx(2 / 3) and rule.lift == pytest.approx(8 / 9)
    assert rule.leverage == pytest.approx(-0.0625) and rule.conviction == pytest.approx(0.75)


def test_tan_steinbach_kumar_market_basket():
    # Tan, Steinbach, Kumar, "Introduction to Data Mining", market-basket table (from memory)
    baskets = [
        ["Bread", "Milk"],
        ["Bread", "Diapers", "Beer", "Eggs"],
        ["Milk", "Diapers", "Beer", "Cola"],
        ["Bread", "Milk", "Diapers", "Beer"],
        ["Bread", "Milk", "Diapers", "Cola"],
    ]
    _, rules = mine(baskets, min_count=1, rules=True)
    rule = rules[(("Diapers", "Milk"), ("Beer",))]
    assert rule.support == pytest.approx(0.4) and rule.confidence == pytest.approx(2 / 3)
    assert rule.lift == pytest.approx(10 / 9) and rule.leverage == pytest.approx(0.04)
    assert rule.conviction == pytest.approx(1.2)
    rule = rules[(("Diapers",), ("Beer",))]
    assert rule.support == pytest.approx(0.6) and rule.confidence == pytest.approx(0.75)
    assert rule.lift == pytest.approx(1.25) and rule.leverage == pytest.approx(0.12)
    assert rule.conviction == pytest.approx(1.6)


def test_han_kamber_all_electronics():
    # Han & Kamber, "Data Mining: Concepts and Techniques", AllElectronics table (from memory)
    baskets = [
        ["I1", "I2", "I5"],
        ["I2", "I4"],
        ["I2", "I3"],
        ["I1", "I2", "I4"],
        ["I1", "I3"],
        ["I2", "I3"],
        ["I1", "I3"],
        ["I1", "I2", "I3", "I5"],
        ["I1", "I2", "I3"],
    ]
    result, rules = mine(baskets, min_count=2, rules=True)
    assert result.itemsets == {
        ("I1",): 6,
        ("I2",): 7,
        ("I3",): 6,
        ("I4",): 2,
        ("I5",): 2,
        ("I1", "I2"): 4,
        ("I1", "I3"): 4,
        ("I1", "I5"): 2,
        ("I2", "I3"): 4,
        ("I2", "I4"): 2,
        ("I2", "I5"): 2,
        ("I1", "I2", "I3"): 2,
        ("I1", "I2", "I5"): 2,
    }
    assert rules[(("I1", "I2"), ("I5",))].confidence == pytest.approx(0.5)
    assert rules[(("I1", "I5"), ("I2",))].confidence == 1.0
    assert rules[(("I5",), ("I1", "I2"))].confidence == 1.0
    assert rules[(("I1",), ("I2", "I5"))].confidence == pytest.approx(1 / 3)


def test_sliding_window_example_in_the_style_of_chi_et_al_2004():
    # Derived from the sliding-window example style of Chi et al., ICDM 2004 (from memory):
    # window of 4, min count 2; then insert {A,C,D}, which expires {C,D}.
    baskets = [["C", "D"], ["A", "B"], ["A", "B", "C"], ["A", "B", "C"]]
    before, _ = mine(baskets, min_count=2, window=4)
    assert before.itemsets == {
        ("A",): 3,
        ("B",): 3,
        ("C",): 3,
        ("A", "B"): 3,
        ("A", "C"): 2,
        ("B", "C"): 2,
        ("A", "B", "C"): 2,
    }
    after, _ = mine(baskets + [["A", "C", "D"]], min_count=2, window=4)
    assert after.itemsets == {
        ("A",): 4,
        ("B",): 3,
        ("C",): 3,
        ("A", "B"): 3,
        ("A", "C"): 3,
        ("B", "C"): 2,
        ("A", "B", "C"): 2,
    }
