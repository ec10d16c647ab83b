"""A basket stream with planted co-purchase changes, for drift tests and demos.

The base stream draws each basket's size from 1 + Poisson(``mean_size`` - 1) and its items
independently from a catalogue with heavy-tailed (Zipf-like, exponent ``skew``) popularity,
so base items are independent of each other: any pattern among them is chance. Each
:class:`Plant` adds its items, together, to a share of the baskets over a span of basket
numbers: ``rate`` from ``start`` to ``end`` (a ramp of ``ramp`` baskets at each edge). A
one-item plant is a popularity spike with no pairing.
"""

from __future__ import annotations

import json
from collections.abc import Iterator, Sequence
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Plant:
    """``items`` bought together in a share ``rate`` of the baskets numbered [start, end)."""

    items: tuple[str, ...]
    rate: float
    start: int = 0
    end: int | None = None
    ramp: int = 0

    def rate_at(self, i: int) -> float:
        end = float("inf") if self.end is None else self.end
        if not self.start <= i < end:
            return 0.0
        if self.ramp:
            edge = min(i - self.start + 1, end - i)
            return self.rate * min(1.0, edge / self.ramp)
        return self.rate


def baskets(
    n: int,
    plants: Sequence[Plant] = (),
    *,
    seed: int = 0,
    catalogue: int = 300,
    mean_size: float = 4.0,
    skew: float = 1.1,
) -> Iterator[list[str]]:
    """``n`` baskets of item names (``item-0001`` ... for the base catalogue)."""
    rng = np.random.default_rng(seed)
    weights = 1.0 / np.arange(1, catalogue + 1) ** skew
    weights /= weights.sum()
    names = [f"item-{k:04d}" for k in range(1, catalogue + 1)]
    for i in range(n):
        size = 1 + rng.poisson(mean_size - 1)
        chosen = set(rng.choice(catalogue, size=min(size, catalogue), replace=False, p=weights).tolist())
        basket = [names[k] for k in sorted(chosen)]
        for plant in plants:
            if rng.random() < plant.rate_at(i):
                basket.extend(item for item in plant.items if item not in basket)
        yield basket


def write_jsonl(
    path: str, rows: Iterator[list[str]], *, start_time: float = 0.0, spacing: float = 1.0
) -> int:
    """Write baskets as JSON Lines (``id``, ``ts``, ``items``); return how many."""
    written = 0
    with open(path, "w", encoding="utf-8") as out:
        for i, items in enumerate(rows):
            out.write(json.dumps({"id": f"b{i}", "ts": start_time + i * spacing, "items": items}) + "\n")
            written += 1
    return written
