"""Exact counts of given itemsets over a batch of baskets (vertical: one pass, then set
intersections of the baskets holding each item)."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from stream_miner.engine.baskets import BasketArrays


def count_itemsets(baskets: BasketArrays, itemsets: Sequence[Sequence[int | None]]) -> list[int]:
    """How many of ``baskets`` hold every item of each itemset (item ids; None, an item
    never seen, counts 0; the empty itemset counts every basket)."""
    wanted = sorted({i for row in itemsets for i in row if i is not None})
    if not wanted:
        return [0 if row else len(baskets) for row in itemsets]
    mask = np.isin(baskets.items, wanted)
    items, rows = baskets.items[mask], baskets.row_of_items()[mask]
    holding = {i: rows[items == i] for i in wanted}  # basket rows, ascending, each once
    counts = []
    for row in itemsets:
        if not row:
            counts.append(len(baskets))
        elif any(i is None for i in row):
            counts.append(0)
        else:
            found = holding[row[0]]  # type: ignore[index]
            for item in row[1:]:
                found = np.intersect1d(found, holding[item], assume_unique=True)  # type: ignore[index]
            counts.append(int(found.size))
    return counts
