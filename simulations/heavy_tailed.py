"""Heavy-tailed basket generator: Zipf item popularity plus planted co-purchase patterns."""

from __future__ import annotations

import numpy as np

_CHUNK = 1 << 16  # Zipf item draws per vectorised batch
_DRAW_BUDGET = 4  # rejection draws allowed per wanted item before sampling exactly


def heavy_tailed_baskets(
    n_baskets: int,
    *,
    n_items: int = 5000,
    avg_size: float = 8,
    zipf_exponent: float = 1.1,
    n_patterns: int = 200,
    pattern_rate: float = 0.3,
    big_basket_rate: float = 0.0,
    big_basket_size: int = 200,
    seed: int = 0,
) -> list[list[int]]:
    """Generate baskets whose item popularity follows p_i ∝ 1/(i+1)^zipf_exponent.

    Basket sizes are geometric with mean avg_size; with probability big_basket_rate a basket
    instead has big_basket_size items (a wholesale order). With probability pattern_rate a
    basket also holds one planted pattern: 2-4 items chosen uniformly, patterns picked with
    Zipf-skewed popularity. The basket is then filled to its size with items drawn by
    popularity, without repeats. Sizes are capped at n_items. Baskets are sorted lists of
    distinct item ids in 0..n_items-1.
    """
    if n_baskets < 0 or n_items < 1 or n_patterns < 0 or avg_size < 1 or big_basket_size < 1:
        raise ValueError("need n_baskets >= 0, n_items >= 1, n_patterns >= 0 and sizes >= 1")
    if not (0 <= pattern_rate <= 1 and 0 <= big_basket_rate <= 1):
        raise ValueError("pattern_rate and big_basket_rate must lie in [0, 1]")
    rng = np.random.default_rng(seed)
    popularity = _zipf_weights(n_items, zipf_exponent)
    sizes = rng.geometric(1 / avg_size, n_baskets)
    sizes[rng.random(n_baskets) < big_basket_rate] = big_basket_size
    sizes = np.minimum(sizes, n_items).tolist()
    patterns = [
        rng.choice(n_items, min(k, n_items), replace=False).tolist() for k in rng.integers(2, 5, n_patterns)
    ]
    planted: list[int | None] = [None] * n_baskets
    if n_patterns:
        chosen = rng.choice(n_patterns, n_baskets, p=_zipf_weights(n_patterns, zipf_exponent))
        for b in np.flatnonzero(rng.random(n_baskets) < pattern_rate).tolist():
            planted[b] = int(chosen[b])

    baskets: list[list[int]] = []
    draws: list[int] = []
    j = 0
    for size, pattern in zip(sizes, planted, strict=True):
        basket = set() if pattern is None else set(patterns[pattern])
        budget = _DRAW_BUDGET * size
        while len(basket) < size and budget:
            if j == len(draws):
                draws = rng.choice(n_items, _CHUNK, p=popularity).tolist()
                j = 0
            basket.add(draws[j])
            j += 1
            budget -= 1
        if len(basket) < size:
            basket.update(_sample_without_replacement(rng, popularity, basket, size - len(basket)))
        baskets.append(sorted(basket))
    return baskets


def _zipf_weights(n: int, exponent: float) -> np.ndarray:
    """Normalised rank weights 1/(i+1)^exponent for i in 0..n-1."""
    weights = 1.0 / np.arange(1, n + 1, dtype=np.float64) ** exponent
    weights /= weights.sum()
    return weights


def _sample_without_replacement(
    rng: np.random.Generator, weights: np.ndarray, exclude: set[int], k: int
) -> list[int]:
    """Draw k distinct items outside `exclude`, successively by weight (Efraimidis-Spirakis).

    This has the same distribution as repeated weighted draws that skip repeats, so it can
    finish a basket that rejection sampling filled only partly.
    """
    keys = rng.exponential(size=weights.size) / weights
    keys[list(exclude)] = np.inf
    chosen: list[int] = np.argpartition(keys, k - 1)[:k].tolist()
    return chosen
