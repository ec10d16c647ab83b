"""Property tests: after every insert/expire step the tree equals a freshly built tree of the
window, and mining it equals the brute-force miner."""

from __future__ import annotations

from collections import Counter

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from brute_force import frequent_itemsets
from stream_miner.engine.fpgrowth import mine_tree
from stream_miner.engine.tree import PrefixTree, frequency_rank, header_table

baskets_st = st.lists(st.integers(0, 9), min_size=1, max_size=7, unique=True)
ranks_st = st.one_of(st.just([]), st.permutations(list(range(10))))


@st.composite
def operation_plans(draw):
    """A rank, and a list of steps; each step inserts some baskets and expires some stored ones."""
    rank = draw(ranks_st)
    steps = []
    stored = 0
    for _ in range(draw(st.integers(1, 12))):
        inserts = draw(st.lists(baskets_st, max_size=6))
        expire_picks = draw(st.lists(st.integers(0, 10**6), max_size=min(stored, 6), unique=True))
        steps.append((inserts, expire_picks))
        stored += len(inserts) - len(expire_picks)
    return rank, steps


def assert_tree_matches(tree: PrefixTree, window: list[list[int]], min_count: int) -> None:
    tree.check_invariants()
    fresh = PrefixTree.build(window, tree.rank) if window else PrefixTree(tree.rank)
    assert tree.paths() == fresh.paths() == dict(Counter(tuple(tree.path_of(b)) for b in window))
    assert tree.node_count() == fresh.node_count()
    assert tree.n_baskets == len(window)
    assert mine_tree(tree.arrays(), min_count) == frequent_itemsets(window, min_count)


@settings(max_examples=150, deadline=None)
@given(operation_plans(), st.integers(1, 4))
def test_batched_insert_and_expire_keep_the_tree_exact(plan, min_count):
    rank, steps = plan
    tree = PrefixTree(rank)
    window: list[list[int]] = []
    handles: list[int] = []
    for inserts, picks in steps:
        positions = sorted({p % len(window) for p in picks}) if window else []
        expired = [handles[p] for p in positions]
        new_handles = tree.update(tree.paths_of(inserts), expired).tolist()
        for p in reversed(positions):
            del window[p], handles[p]
        window += inserts
        handles += new_handles
        assert_tree_matches(tree, window, min_count)


@settings(max_examples=100, deadline=None)
@given(st.lists(baskets_st, min_size=1, max_size=25), ranks_st, st.randoms(use_true_random=False))
def test_single_basket_insert_and_expire_by_items(baskets, rank, rnd):
    tree = PrefixTree(rank)
    window: list[list[int]] = []
    for basket in baskets:
        tree.insert(basket)
        window.append(basket)
        if rnd.random() < 0.4:
            victim = window.pop(rnd.randrange(len(window)))
            tree.expire(list(reversed(victim)))  # item order in the call does not matter
        assert_tree_matches(tree, window, 1)


def test_expiring_a_basket_that_is_not_stored_changes_nothing():
    tree = PrefixTree()
    tree.insert([1, 2, 3])
    before = tree.paths()
    for absent in ([1, 2], [1, 2, 3, 4], [7]):
        with pytest.raises(ValueError, match="not in the tree"):
            tree.expire(absent)
    with pytest.raises(ValueError, match="ends no stored basket"):
        tree.update(tree.paths_of([]), [tree.handle_of([1, 2, 3])] * 2)
    assert tree.paths() == before
    tree.check_invariants()


def test_empty_basket_and_negative_ids_are_refused():
    tree = PrefixTree()
    with pytest.raises(ValueError, match="empty"):
        tree.insert([])
    with pytest.raises(ValueError, match="item ids must lie"):
        tree.insert([-1])


def test_freed_nodes_are_reused_so_slots_do_not_grow_under_steady_sliding():
    rng = np.random.default_rng(3)
    stream = [rng.choice(30, size=rng.integers(1, 8), replace=False).tolist() for _ in range(3000)]
    tree = PrefixTree()
    handles = tree.update(tree.paths_of(stream[:500]), []).tolist()
    capacity_after_fill = tree.arrays().count.size
    for start in range(500, 3000, 100):
        expired = handles[:100]
        handles = handles[100:] + tree.update(tree.paths_of(stream[start : start + 100]), expired).tolist()
    tree.check_invariants()
    assert tree.node_count() == PrefixTree.build(stream[-500:], tree.rank).node_count()
    assert tree.arrays().count.size <= 2 * capacity_after_fill


def test_header_table_node_links_cover_every_node_of_each_item():
    baskets = [[0, 1, 2], [1, 2], [2, 3], [0, 2], [1]]
    tree = PrefixTree.build(baskets, frequency_rank([2, 3, 4, 1]))
    arrays = tree.arrays()
    header = header_table(arrays, 4)
    assert header.item_count.tolist() == [2, 3, 4, 1]
    for item in range(4):
        nodes = header.nodes_of(item)
        assert (arrays.item[nodes] == item).all()
        assert arrays.count[nodes].sum() == header.item_count[item]
