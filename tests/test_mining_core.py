"""The mining core: the numpy path, the compiled FP-growth loop and a hand-over between them
find the same itemsets in the same order; the loop is exact whatever sizes its arrays start at
(every enlargement path taken), with the guards of ``mine_tree`` (size limit, allowed items,
itemset cap)."""

from __future__ import annotations

import subprocess
import sys
from collections.abc import Iterator
from contextlib import contextmanager

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from brute_force import frequent_itemsets
from stream_miner.engine import fpgrowth
from stream_miner.engine.fpgrowth import mine_tree, mine_tree_named
from stream_miner.engine.limits import ResultTooLarge
from stream_miner.engine.tree import PrefixTree, frequency_rank

# many copies of few items: deep projections, merged rows and single paths
baskets_st = st.lists(
    st.lists(st.integers(0, 11), min_size=1, max_size=9, unique=True), min_size=1, max_size=40
)
TINY = {"codes": (0, 1), "rows": (0, 1), "frequent": (0, 1), "out": (0, 1)}
NUMPY_ONLY, KERNEL_ONLY, HAND_OVER = 10**12, 0, 3  # work budgets of the numpy path


@contextmanager
def numpy_budget(budget: int) -> Iterator[None]:
    """Mine with this budget of the numpy path, as in a process where the loop never ran."""
    growth = fpgrowth._Growth
    saved = fpgrowth.NUMPY_BUDGET, growth.loaded, growth.numpy_steps
    fpgrowth.NUMPY_BUDGET, growth.loaded, growth.numpy_steps = budget, False, 0
    try:
        yield
    finally:
        fpgrowth.NUMPY_BUDGET, growth.loaded, growth.numpy_steps = saved


def mine_with(budget: int, *args, **kwargs) -> dict:
    with numpy_budget(budget):
        return mine_tree(*args, **kwargs)


# baskets, min_count, max_size, allowed items
MINE_CASES = (
    baskets_st,
    st.integers(1, 5),
    st.one_of(st.none(), st.integers(1, 4)),
    st.one_of(st.none(), st.lists(st.booleans(), min_size=12, max_size=12)),
)


def tree_of(baskets: list[list[int]]) -> PrefixTree:
    counts = np.bincount([i for b in baskets for i in b], minlength=12)
    return PrefixTree.build(baskets, frequency_rank(counts))


@settings(max_examples=150, deadline=None)
@given(*MINE_CASES)
def test_the_compiled_mine_is_exact_from_the_smallest_arrays(baskets, min_count, max_size, allowed):
    tree = tree_of(baskets).arrays()
    mask = None if allowed is None else np.array(allowed)
    roomy = mine_with(KERNEL_ONLY, tree, min_count, max_size=max_size, allowed=mask)
    saved = fpgrowth._FIRST_SIZES
    fpgrowth._FIRST_SIZES = TINY
    try:
        tiny = mine_with(KERNEL_ONLY, tree, min_count, max_size=max_size, allowed=mask)
    finally:
        fpgrowth._FIRST_SIZES = saved
    kept = baskets if mask is None else [[i for i in b if allowed[i]] for b in baskets]
    assert roomy == frequent_itemsets([b for b in kept if b], min_count, max_size)
    assert list(tiny.items()) == list(roomy.items())  # same itemsets, counts and order


@settings(max_examples=150, deadline=None)
@given(*MINE_CASES)
def test_numpy_path_and_hand_over_match_the_loop_in_order(baskets, min_count, max_size, allowed):
    tree = tree_of(baskets).arrays()
    mask = None if allowed is None else np.array(allowed)
    found = [
        list(mine_with(budget, tree, min_count, max_size=max_size, allowed=mask).items())
        for budget in (NUMPY_ONLY, KERNEL_ONLY, HAND_OVER)
    ]
    kept = baskets if mask is None else [[i for i in b if allowed[i]] for b in baskets]
    assert dict(found[0]) == frequent_itemsets([b for b in kept if b], min_count, max_size)
    assert found[1] == found[0]
    assert found[2] == found[0]


@settings(max_examples=80, deadline=None)
@given(
    baskets_st,
    st.integers(1, 3),
    st.integers(1, 60),
    st.sampled_from([NUMPY_ONLY, KERNEL_ONLY, HAND_OVER]),
)
def test_the_itemset_cap_holds_exactly(baskets, min_count, cap, budget):
    expected = frequent_itemsets(baskets, min_count)
    tree = tree_of(baskets).arrays()
    if len(expected) > cap:
        with pytest.raises(ResultTooLarge) as info:
            mine_with(budget, tree, min_count, max_itemsets=cap)
        assert cap < info.value.found <= len(expected)
    else:
        assert mine_with(budget, tree, min_count, max_itemsets=cap) == expected


# wider baskets over more items: bases with more frequent codes than the loop grows as bit masks
WIDE_CASES = (
    st.lists(st.lists(st.integers(0, 25), min_size=1, max_size=20, unique=True), min_size=1, max_size=30),
    st.integers(1, 4),
    st.one_of(st.none(), st.integers(2, 4)),
)


@settings(max_examples=60, deadline=None)
@given(*WIDE_CASES)
def test_wide_bases_mine_alike_in_the_loop_and_in_numpy(baskets, min_count, max_size):
    """Bases over more than ``growth_bits.BITS`` frequent codes (grown as arrays) and below
    (as bit masks), single paths among them: the loop lists the numpy path's itemsets in order."""
    tree = tree_of(baskets).arrays()
    loop = mine_with(KERNEL_ONLY, tree, min_count, max_size=max_size)
    assert list(loop.items()) == list(mine_with(NUMPY_ONLY, tree, min_count, max_size=max_size).items())
    if max_size is not None:
        assert loop == frequent_itemsets(baskets, min_count, max_size)


def test_a_dense_mine_crosses_from_arrays_to_bit_masks_in_order():
    """20 items in 70 % of 60 baskets at a third: top bases of up to 19 frequent codes."""
    rng = np.random.default_rng(7)
    baskets = [[i for i in range(20) if rng.random() < 0.7] or [0] for _ in range(60)]
    tree = tree_of(baskets).arrays()
    loop = mine_with(KERNEL_ONLY, tree, 20)
    assert len(loop) > 1000
    assert loop == frequent_itemsets(baskets, 20, 6)
    assert list(loop.items()) == list(mine_with(NUMPY_ONLY, tree, 20).items())


@settings(max_examples=100, deadline=None)
@given(
    *MINE_CASES,
    st.permutations(["k", "b10", "b9", "Z", "a", "é", "a b", "b", "", "zz", "B", "-"]),
    st.sampled_from([NUMPY_ONLY, KERNEL_ONLY, HAND_OVER]),
)
def test_named_mine_is_the_id_mine_named_in_order(baskets, min_count, max_size, allowed, names, budget):
    """Names in another order than the ids: the same itemsets and counts, in the same order."""
    tree = tree_of(baskets).arrays()
    mask = None if allowed is None else np.array(allowed)
    by_id = mine_with(budget, tree, min_count, max_size=max_size, allowed=mask)
    with numpy_budget(budget):
        named = mine_tree_named(tree, min_count, names, max_size=max_size, allowed=mask)
    expected = [(tuple(sorted(names[i] for i in items)), count) for items, count in by_id.items()]
    assert list(named.items()) == expected


def test_the_numpy_budget_is_spent_over_a_processs_mines():
    """Mines each under the budget: once their steps add up past it, the next mine is the loop's."""
    baskets = [[i for i in range(12) if (b >> i) & 1] for b in range(1, 300, 7)]
    tree = tree_of(baskets).arrays()
    with numpy_budget(NUMPY_ONLY):
        expected = list(mine_tree(tree, 2).items())
        steps = fpgrowth._Growth.numpy_steps
    assert steps > 4
    with numpy_budget(steps + steps // 2):
        found = [list(mine_tree(tree, 2).items())]
        found.append(list(mine_tree(tree, 2).items()))  # starts under the budget: all in numpy
        assert not fpgrowth._Growth.loaded and fpgrowth._Growth.numpy_steps == 2 * steps
        found.append(list(mine_tree(tree, 2).items()))
        assert fpgrowth._Growth.loaded and fpgrowth._Growth.numpy_steps == 2 * steps
    assert found == [expected] * 3


def test_mining_the_bundled_example_does_not_import_numba() -> None:
    command = [sys.executable, "-X", "importtime", "-m", "stream_miner", "mine", "--json", "--rules"]
    done = subprocess.run(command, capture_output=True, text=True, check=True)
    imported = [line.rsplit("|", 1)[-1].strip() for line in done.stderr.splitlines()]
    assert "stream_miner.engine.fpgrowth" in imported and '"type": "rule"' in done.stdout
    assert not [name for name in imported if name.split(".")[0] == "numba"]
