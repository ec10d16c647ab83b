"""A basket stream with planted co-purchase changes, for drift tests and demos.

The base stream (:func:`zipf_baskets`) draws each basket's size from 1 + Poisson(``mean_size``
- 1) and its items independently from a catalogue with heavy-tailed (Zipf-like, exponent
``skew``) popularity, so base items are independent of each other: any pattern among them is
chance. Each :class:`Plant` adds its items, together, to a share of the baskets over a span of
basket numbers (:func:`add_plants`): ``rate`` from ``start`` to ``end``, with a ramp of
``ramp`` baskets at each edge inside the stream, and with a ``period`` the rate follows a slow
cycle. A one-item plant is a popularity spike with no pairing.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Plant:
    """``items`` bought together in a share ``rate`` of the baskets numbered [start, end).

    ``ramp``: the rate climbs over the first ``ramp`` baskets and falls over the last ones
    (an edge at basket 0 has no ramp: the plant is there from the start). ``period``: the rate
    follows a cycle of that many baskets, rate x (1 - cos(2 pi (i - start) / period)) / 2,
    from 0 at ``start`` up to ``rate`` half a period later."""

    items: tuple[str, ...]
    rate: float
    start: int = 0
    end: int | None = None
    ramp: int = 0
    period: int = 0

    def rate_at(self, i: int) -> float:
        """The share of basket ``i``'s chance of holding the items.

        >>> Plant(("a", "b"), 0.2, start=10, ramp=4).rate_at(11)
        0.1
        """
        end = math.inf if self.end is None else self.end
        if not self.start <= i < end:
            return 0.0
        rate = self.rate
        if self.period:
            rate *= (1 - math.cos(2 * math.pi * (i - self.start) / self.period)) / 2
        if self.ramp:
            rising = i - self.start + 1 if self.start > 0 else math.inf
            edge = min(rising, end - i)
            rate *= min(1.0, edge / self.ramp)
        return rate


def zipf_baskets(
    n: int, rng: np.random.Generator, *, catalogue: int = 300, mean_size: float = 4.0, skew: float = 1.1
) -> Iterator[list[str]]:
    """``n`` baskets of independent items ``item-0001`` ... with Zipf-like popularity."""
    weights = 1.0 / np.arange(1, catalogue + 1) ** skew
    weights /= weights.sum()
    names = item_names(catalogue)
    for _ in range(n):
        size = 1 + rng.poisson(mean_size - 1)
        chosen = set(rng.choice(catalogue, size=min(size, catalogue), replace=False, p=weights).tolist())
        yield [names[k] for k in sorted(chosen)]


def item_names(catalogue: int) -> list[str]:
    """The base catalogue's item names, ``item-0001`` first."""
    return [f"item-{k:04d}" for k in range(1, catalogue + 1)]


def add_plants(
    rows: Iterable[list[str]], plants: Sequence[Plant], rng: np.random.Generator
) -> Iterator[list[str]]:
    """``rows`` with each plant's items added to basket ``i`` with chance ``rate_at(i)``."""
    for i, basket in enumerate(rows):
        for plant in plants:
            if rng.random() < plant.rate_at(i):
                basket.extend(item for item in plant.items if item not in basket)
        yield basket


def baskets(
    n: int,
    plants: Sequence[Plant] = (),
    *,
    seed: int = 0,
    catalogue: int = 300,
    mean_size: float = 4.0,
    skew: float = 1.1,
) -> Iterator[list[str]]:
    """``n`` baskets of item names: the Zipf base with ``plants`` added (one generator for both)."""
    rng = np.random.default_rng(seed)
    base = zipf_baskets(n, rng, catalogue=catalogue, mean_size=mean_size, skew=skew)
    return add_plants(base, plants, rng)


def write_jsonl(
    path: str,
    rows: Iterable[list[str]],
    *,
    start_time: float = 0.0,
    spacing: float = 1.0,
    times: Sequence[float] | None = None,
) -> int:
    """Write baskets as JSON Lines (``id`` b0, b1, ..., ``ts``, ``items``); return how many.
    Event times are ``times`` when given, else ``start_time`` + i x ``spacing``."""
    written = 0
    with open(path, "w", encoding="utf-8") as out:
        for i, items in enumerate(rows):
            ts = start_time + i * spacing if times is None else times[i]
            out.write(json.dumps({"id": f"b{i}", "ts": ts, "items": items}) + "\n")
            written += 1
    return written
