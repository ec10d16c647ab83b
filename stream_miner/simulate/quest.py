"""IBM Quest synthetic transaction generator (Agrawal & Srikant, VLDB 1994, section 2.4.3)."""

from __future__ import annotations

import numpy as np

_CORRELATION = 0.5  # mean fraction of a pattern's items taken from the previous pattern
_CORRUPTION_MEAN = 0.5
_CORRUPTION_SD = 0.1**0.5  # the paper gives variance 0.1
_CORRUPTION_MAX = 0.99  # capped below 1 so every pattern can still contribute items
_CHUNK = 1 << 16  # pattern picks drawn per vectorised batch


def quest_baskets(
    n_baskets: int,
    *,
    avg_size: float = 10,
    avg_pattern_size: float = 4,
    n_patterns: int = 2000,
    n_items: int = 1000,
    seed: int = 0,
) -> list[list[int]]:
    """Generate Quest-style baskets (T=avg_size, I=avg_pattern_size, L=n_patterns, N=n_items).

    A pool of potentially large itemsets is built first: sizes about Poisson(I), each sharing
    an exponentially distributed fraction (mean 0.5) of its items with the previous one and
    taking the rest uniformly at random, with exponential(1) weights and a normal(0.5,
    variance 0.1) corruption level. Each basket has target size about Poisson(T) and is filled
    with itemsets picked by weight; a picked itemset loses items while a uniform draw is below
    its corruption level. An itemset that would overflow the basket is added anyway half of
    the time and otherwise carried over to the next basket (an empty basket always takes it).
    As in the authors' reference generator, sizes are 1 + Poisson(mean - 1), so nothing is
    empty; basket targets are capped at the number of items the pool covers. Baskets are
    sorted lists of distinct item ids in 0..n_items-1.
    """
    if n_baskets < 0 or n_patterns < 1 or n_items < 1 or avg_size < 1 or avg_pattern_size < 1:
        raise ValueError("need n_baskets >= 0, n_patterns >= 1, n_items >= 1 and mean sizes >= 1")
    rng = np.random.default_rng(seed)
    patterns = _pattern_pool(rng, n_patterns, avg_pattern_size, n_items)
    flat = np.concatenate(patterns)
    offsets = np.zeros(n_patterns + 1, dtype=np.int64)
    np.cumsum([p.size for p in patterns], out=offsets[1:])
    weights = rng.exponential(1.0, n_patterns)
    weights /= weights.sum()
    corruption = rng.normal(_CORRUPTION_MEAN, _CORRUPTION_SD, n_patterns).clip(0.0, _CORRUPTION_MAX)
    reachable = np.unique(flat).size  # a basket can never hold more items than the pool covers
    targets = np.minimum(1 + rng.poisson(avg_size - 1, n_baskets), reachable).tolist()

    baskets: list[list[int]] = []
    items: list[int] = []
    bounds: list[int] = [0]
    add_anyway: list[bool] = []
    i = 0
    carried: list[int] = []
    for target in targets:
        basket = set(carried)
        carried = []
        while len(basket) < target:
            if i == len(add_anyway):
                items, bounds, add_anyway = _corrupted_picks(rng, flat, offsets, weights, corruption)
                i = 0
            pick = items[bounds[i] : bounds[i + 1]]
            overflow_kept = add_anyway[i]
            i += 1
            merged = basket.union(pick)
            if len(merged) > target and basket:
                if overflow_kept:
                    basket = merged
                else:
                    carried = pick
                break
            basket = merged
        baskets.append(sorted(basket))
    return baskets


def _pattern_pool(
    rng: np.random.Generator, n_patterns: int, avg_size: float, n_items: int
) -> list[np.ndarray]:
    """Build the potentially large itemsets, each correlated with its predecessor."""
    pool: list[np.ndarray] = []
    previous = np.empty(0, dtype=np.int64)
    for _ in range(n_patterns):
        size = min(1 + int(rng.poisson(avg_size - 1)), n_items)
        shared = min(round(rng.exponential(_CORRELATION) * size), size, previous.size)
        chosen = rng.choice(previous, shared, replace=False).tolist() if shared else []
        taken = set(chosen)
        while len(chosen) < size:
            item = int(rng.integers(n_items))
            if item not in taken:
                taken.add(item)
                chosen.append(item)
        previous = np.array(chosen, dtype=np.int64)
        pool.append(previous)
    return pool


def _corrupted_picks(
    rng: np.random.Generator,
    flat: np.ndarray,
    offsets: np.ndarray,
    weights: np.ndarray,
    corruption: np.ndarray,
) -> tuple[list[int], list[int], list[bool]]:
    """Draw a batch of weighted itemset picks with corruption applied.

    Returns the kept items of all picks concatenated, the pick boundaries into that list and,
    per pick, whether it is added anyway when it overflows a basket.
    """
    picked = rng.choice(weights.size, _CHUNK, p=weights)
    starts = offsets[picked]
    sizes = offsets[picked + 1] - starts
    # Dropping "while uniform < c" removes a geometric number of items: P(k) = c^k (1 - c).
    dropped = np.minimum(rng.geometric(1.0 - corruption[picked]) - 1, sizes)
    owner = np.repeat(np.arange(_CHUNK), sizes)
    first = np.cumsum(sizes) - sizes
    position = np.arange(owner.size) - first[owner]
    members = flat[starts[owner] + position]
    shuffled = np.lexsort((rng.random(owner.size), owner))  # random order within each pick
    kept = members[shuffled][position >= dropped[owner]]
    bounds = np.zeros(_CHUNK + 1, dtype=np.int64)
    np.cumsum(sizes - dropped, out=bounds[1:])
    return kept.tolist(), bounds.tolist(), (rng.random(_CHUNK) < 0.5).tolist()
