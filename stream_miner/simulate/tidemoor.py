"""The demo's invented setting: the Tidemoor harbour market, a day of checkouts with four
planted changes (every name invented, no real shop or brand).

The base stream is :func:`stream_miner.simulate.planted.baskets` over a catalogue of plain
goods. Planted: a pair that appears at once, a pair that grows in gradually, a pair that
stops, and one item that gets popular with no partner (which must raise nothing).
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass

from stream_miner.drift.events import EMERGED, FADED
from stream_miner.simulate.planted import Plant, baskets

BASKETS = 12_000  # one pass of the scenario
GOODS = (
    "white loaf", "whole milk", "free-range eggs", "salted butter", "apples", "bananas", "potatoes",
    "onions", "carrots", "cheddar", "rolled oats", "black tea", "ground coffee", "rice", "pasta",
    "tinned tomatoes", "orange juice", "natural yogurt", "brown sugar", "plain flour", "sea salt",
    "rapeseed oil", "chicken thighs", "smoked haddock", "mussels", "garden peas", "sweetcorn",
    "lettuce", "cucumber", "spring onions", "lemons", "garlic", "soda bread", "oatcakes",
    "strawberry jam", "honey", "peanut butter", "digestive biscuits", "crisps", "sparkling water",
    "ginger ale", "dishwasher tablets", "kitchen roll", "washing-up liquid", "bin bags",
    "tea lights", "matches", "firewood", "birdseed", "dog biscuits", "cat food", "postcards",
    "newspaper", "batteries", "light bulbs", "sellotape", "string", "plasters", "sun cream",
    "rain ponchos",
)  # fmt: skip


@dataclass(frozen=True)
class Planted:
    """A planted change as the demo's summary states it: ``kind`` (emerged, faded, or None
    for a change that must raise no event), from basket ``at``."""

    items: tuple[str, ...]
    kind: str | None
    at: int
    how: str


CHANGES = (
    Planted(("crab rolls", "samphire"), EMERGED, 3_000, "appears at once"),
    Planted(("sea-salt fudge", "toffee apples"), EMERGED, 6_000, "grows in over 1,500 baskets"),
    Planted(("cocoa mix", "marshmallows"), FADED, 7_000, "stops"),
    Planted(("harbour cider",), None, 2_000, "one item gets popular, with no partner"),
)
PLANTS = (
    Plant(("crab rolls", "samphire"), 0.10, start=3_000),
    Plant(("sea-salt fudge", "toffee apples"), 0.12, start=6_000, ramp=1_500),
    Plant(("cocoa mix", "marshmallows"), 0.10, end=7_000),
    Plant(("harbour cider",), 0.30, start=2_000),
)


def demo_baskets(seed: int = 7) -> Iterator[list[str]]:
    """One pass of the scenario: ``BASKETS`` baskets of item names."""
    names = {f"item-{k:04d}": name for k, name in enumerate(GOODS, 1)}
    for basket in baskets(BASKETS, PLANTS, seed=seed, catalogue=len(GOODS)):
        yield [names.get(item, item) for item in basket]
