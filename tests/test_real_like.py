"""The generated stand-ins for real basket sets (simulations/real_like.py) have the shape they
promise: sizes, item counts, well-formed baskets, the same data for the same seed, and for the
dense set about 100,000 frequent itemsets at 5 % (counted with pyfim's FP-growth)."""

from __future__ import annotations

import statistics

import fim
import pytest

from simulations.real_like import grocery_like_baskets, supermarket_like_baskets


def test_supermarket_like_is_dense_with_many_frequent_itemsets() -> None:
    baskets = supermarket_like_baskets(4_627, seed=3)
    assert baskets == supermarket_like_baskets(4_627, seed=3)
    assert all(b == sorted(set(b)) and all(0 <= i < 220 for i in b) for b in baskets)
    assert 17 <= statistics.fmean(map(len, baskets)) <= 20
    assert 50_000 <= len(fim.fpgrowth(baskets, supp=5, zmin=1, report="a")) <= 200_000


def test_grocery_like_is_sparse() -> None:
    baskets = grocery_like_baskets(9_835, seed=3)
    assert all(b == sorted(set(b)) and all(0 <= i < 169 for i in b) for b in baskets)
    assert 4 <= statistics.fmean(map(len, baskets)) <= 5


def test_supermarket_like_rejects_bad_parameters() -> None:
    with pytest.raises(ValueError, match="positive rates"):
        supermarket_like_baskets(10, decay=0)
