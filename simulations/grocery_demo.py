"""The bundled example: checkouts of Larkspur Street Market, an invented neighbourhood grocery.

Baskets draw items by popularity plus a few habitual pairings. Half way through, a
promotion starts (pancake mix with maple syrup); in the last third, salsa is out of stock,
which breaks its usual pairing with tortilla chips. Regenerate the bundled file with
``python -m simulations.grocery_demo --out stream_miner/data/larkspur_market.jsonl``.
"""

from __future__ import annotations

import argparse
import json
from datetime import UTC, datetime

import numpy as np

ITEMS = [
    "sourdough loaf",
    "salted butter",
    "whole milk",
    "oat milk",
    "free-range eggs",
    "coffee beans",
    "paper filters",
    "bananas",
    "apples",
    "baby spinach",
    "cherry tomatoes",
    "cheddar",
    "tortilla chips",
    "tomato salsa",
    "pasta",
    "passata",
    "parmesan",
    "rice",
    "chickpeas",
    "greek yogurt",
    "granola",
    "honey",
    "dark chocolate",
    "sparkling water",
    "lemons",
    "basil",
    "pancake mix",
    "maple syrup",
    "dish soap",
    "sponges",
]
HABITS = [  # (items, share of baskets)
    (("coffee beans", "paper filters"), 0.06),
    (("pasta", "passata", "parmesan"), 0.05),
    (("tortilla chips", "tomato salsa"), 0.06),
    (("greek yogurt", "granola", "honey"), 0.04),
    (("sourdough loaf", "salted butter"), 0.07),
    (("dish soap", "sponges"), 0.03),
]
PROMOTION = (("pancake mix", "maple syrup"), 0.08)
START = datetime(2026, 11, 2, 8, 0, tzinfo=UTC).timestamp()


def checkouts(n: int, seed: int = 7) -> list[dict]:
    """``n`` checkouts as JSON-ready objects with id, ts and items."""
    rng = np.random.default_rng(seed)
    popularity = 1.0 / np.arange(1, len(ITEMS) + 1) ** 0.5
    order = rng.permutation(len(ITEMS))
    weights = np.empty(len(ITEMS))
    weights[order] = popularity / popularity.sum()
    out = []
    ts = START
    for i in range(n):
        basket = set(rng.choice(len(ITEMS), size=rng.integers(1, 5), replace=False, p=weights).tolist())
        names = {ITEMS[j] for j in basket}
        habits = list(HABITS) + ([PROMOTION] if i >= n // 2 else [])
        for items, share in habits:
            if rng.random() < share:
                names.update(items)
        if i >= 2 * n // 3:
            names.discard("tomato salsa")
        if not names:
            names.add("bananas")
        ts += float(rng.exponential(20.0))
        out.append({"id": f"larkspur-{i + 1:05d}", "ts": round(ts, 3), "items": sorted(names)})
    return out


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--baskets", type=int, default=3000)
    parser.add_argument("--seed", type=int, default=7)
    parser.add_argument("--out", required=True)
    args = parser.parse_args()
    with open(args.out, "w", encoding="utf-8") as out:
        for record in checkouts(args.baskets, args.seed):
            out.write(json.dumps(record, separators=(",", ":")) + "\n")


if __name__ == "__main__":
    main()
