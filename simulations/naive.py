"""Deliberately naive baselines used only as benchmark comparators and cross-checks."""

from __future__ import annotations

from collections import Counter
from collections.abc import Sequence


class NaiveNode:
    """FP-tree node as a plain object with a dict of children."""

    def __init__(self, item: int | None, parent: NaiveNode | None) -> None:
        self.item = item
        self.count = 0
        self.parent = parent
        self.children: dict[int, NaiveNode] = {}


class NaiveFPTree:
    """Object-per-node FP-tree with a header table mapping each item to its nodes."""

    def __init__(self) -> None:
        self.root = NaiveNode(None, None)
        self.header: dict[int, list[NaiveNode]] = {}

    def insert(self, path: Sequence[int], count: int = 1) -> None:
        """Add `count` occurrences of `path` (items already in tree order)."""
        node = self.root
        for item in path:
            child = node.children.get(item)
            if child is None:
                child = NaiveNode(item, node)
                node.children[item] = child
                self.header.setdefault(item, []).append(child)
            child.count += count
            node = child

    def expire(self, path: Sequence[int]) -> None:
        """Remove one occurrence of a previously inserted `path`, pruning nodes that reach 0."""
        node = self.root
        for item in path:
            child = node.children[item]
            child.count -= 1
            if child.count == 0:
                del node.children[item]
                nodes = self.header[item]
                nodes.remove(child)
                if not nodes:
                    del self.header[item]
            node = child

    def node_count(self) -> int:
        """Number of nodes, not counting the root."""
        return sum(len(nodes) for nodes in self.header.values())


def naive_fpgrowth(baskets: list[list[int]], min_count: int) -> dict[frozenset[int], int]:
    """All itemsets occurring in at least `min_count` baskets, with their counts.

    Classic FP-growth (Han, Pei, Yin, SIGMOD 2000): one object tree over the frequent items
    in descending frequency order (ties by item id), mined recursively through the
    conditional pattern bases reached by the header node lists.
    """
    if min_count < 1:
        raise ValueError("min_count must be at least 1")
    result: dict[frozenset[int], int] = {}
    _mine([(list(dict.fromkeys(basket)), 1) for basket in baskets], min_count, (), result)
    return result


def _mine(
    base: list[tuple[list[int], int]],
    min_count: int,
    suffix: tuple[int, ...],
    result: dict[frozenset[int], int],
) -> None:
    """Build the FP-tree of a (conditional) pattern base and mine it bottom-up."""
    counts: Counter[int] = Counter()
    for items, count in base:
        for item in items:
            counts[item] += count
    frequent = {item: n for item, n in counts.items() if n >= min_count}
    if not frequent:
        return
    rank = {item: r for r, item in enumerate(sorted(frequent, key=lambda i: (-frequent[i], i)))}
    tree = NaiveFPTree()
    for items, count in base:
        tree.insert(sorted((i for i in items if i in rank), key=rank.__getitem__), count)
    for item in sorted(frequent, key=rank.__getitem__, reverse=True):
        itemset = suffix + (item,)
        result[frozenset(itemset)] = frequent[item]
        conditional: list[tuple[list[int], int]] = []
        for node in tree.header[item]:
            prefix: list[int] = []
            parent = node.parent
            while parent is not None and parent.item is not None:
                prefix.append(parent.item)
                parent = parent.parent
            if prefix:
                conditional.append((prefix, node.count))
        _mine(conditional, min_count, itemset, result)
