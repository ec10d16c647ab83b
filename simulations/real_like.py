"""Generated stand-ins for two real basket sets: a sparse grocery and a dense supermarket."""

from __future__ import annotations

import numpy as np

from simulations.heavy_tailed import heavy_tailed_baskets


def grocery_like_baskets(n_baskets: int, *, seed: int = 0) -> list[list[int]]:
    """Sparse baskets sized like a small grocery's till data: 169 items, about 4.4 a basket."""
    return heavy_tailed_baskets(
        n_baskets, n_items=169, avg_size=4.4, zipf_exponent=1.0, n_patterns=30, seed=seed
    )


def supermarket_like_baskets(
    n_baskets: int,
    *,
    n_items: int = 220,
    top_rate: float = 0.75,
    decay: float = 25.0,
    group_size: int = 8,
    shopper_shape: float = 5.0,
    group_shape: float = 5.0,
    seed: int = 0,
) -> list[list[int]]:
    """Dense baskets with correlated item groups, shaped like a supermarket's department data.

    Item i's base rate is top_rate * exp(-i / decay) (about 18.5 items a basket with the
    defaults; some 70 items above 5 %). Items fall at random into groups (departments) of about
    group_size. Every basket draws a shopper scale (Gamma, mean 1, shape shopper_shape) and one
    affinity per group (Gamma, mean 1, shape group_shape); an item is in the basket with
    probability min(1, base rate * scale * its group's affinity), independently given those.
    The shared scale and affinities make items co-occur, so low supports give very many
    frequent itemsets (about 100,000 at 5 % over 4,600 baskets). Baskets are sorted item ids.
    """
    positive = min(top_rate, decay, shopper_shape, group_shape) > 0
    if not positive or n_baskets < 0 or n_items < 1 or group_size < 1:
        raise ValueError("need n_baskets >= 0, n_items >= 1, group_size >= 1 and positive rates and shapes")
    rng = np.random.default_rng(seed)
    base = top_rate * np.exp(-np.arange(n_items) / decay)
    n_groups = max(1, n_items // group_size)
    group_of = rng.integers(0, n_groups, n_items)
    scale = rng.gamma(shopper_shape, 1 / shopper_shape, (n_baskets, 1))
    affinity = rng.gamma(group_shape, 1 / group_shape, (n_baskets, n_groups))[:, group_of]
    chosen = rng.random((n_baskets, n_items)) < np.minimum(1.0, base * scale * affinity)
    return [np.flatnonzero(row).tolist() for row in chosen]
