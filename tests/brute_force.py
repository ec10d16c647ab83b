"""An independent brute-force miner: counts every subset of every basket. For small data only."""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Sequence
from itertools import combinations


def frequent_itemsets(
    baskets: Iterable[Iterable], min_count: int, max_len: int | None = None
) -> dict[tuple, int]:
    """Every itemset (sorted tuple) contained in at least ``min_count`` baskets."""
    counts: Counter[tuple] = Counter()
    for basket in baskets:
        items = sorted(set(basket))
        longest = len(items) if max_len is None else min(max_len, len(items))
        for size in range(1, longest + 1):
            counts.update(combinations(items, size))
    return {itemset: n for itemset, n in counts.items() if n >= min_count}


def rules(itemsets: dict[tuple, int], n_baskets: int) -> dict[tuple[tuple, tuple], dict[str, float]]:
    """All rules of ``itemsets`` with the textbook measures, keyed by (antecedent, consequent)."""
    out = {}
    for itemset, count in itemsets.items():
        for size in range(1, len(itemset)):
            for left in combinations(itemset, size):
                right = tuple(i for i in itemset if i not in left)
                p_xy = count / n_baskets
                p_x = itemsets[left] / n_baskets
                p_y = itemsets[right] / n_baskets
                confidence = p_xy / p_x
                out[(left, right)] = {
                    "support": p_xy,
                    "confidence": confidence,
                    "lift": confidence / p_y,
                    "leverage": p_xy - p_x * p_y,
                    "conviction": float("inf") if confidence == 1 else (1 - p_y) / (1 - confidence),
                }
    return out


def window(baskets: Sequence, size: int | None) -> Sequence:
    """The last ``size`` baskets (all when size is None)."""
    return baskets if size is None else baskets[max(0, len(baskets) - size) :]
