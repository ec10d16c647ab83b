"""When does rebuilding the tree in the current item order pay off? One run, side by side.

    python -m simulations.bench_reorder [--window 100000] [--min-support 0.005]

A Quest window is followed by a second window whose item popularity is shuffled (items are
relabelled by a random permutation), so the tree's item order, fixed on the first window,
is stale once the second window has replaced the first. For that window the benchmark
measures the stale tree and a tree rebuilt in the current frequency order: node count, a
full mine, and the rebuild itself, plus what the engine's sampled test (8,192 baskets)
estimates. Prints one JSON object.
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from collections.abc import Sequence
from fractions import Fraction

import numpy as np

from simulations.bench_engine import environment, load_baskets, log
from stream_miner.engine.baskets import BasketArrays
from stream_miner.engine.fpgrowth import mine_tree
from stream_miner.engine.miner import ORDER_SAMPLE
from stream_miner.engine.tree import PrefixTree, frequency_rank


def build(baskets: BasketArrays, rank: np.ndarray) -> tuple[PrefixTree, float]:
    started = time.perf_counter()
    tree = PrefixTree(rank, capacity_hint=8 * len(baskets))
    tree.update(tree.order_paths(baskets), ())
    return tree, time.perf_counter() - started


def timed_mine(tree: PrefixTree, min_count: int, repeats: int = 3) -> float:
    runs = []
    for _ in range(repeats):
        started = time.perf_counter()
        mine_tree(tree.arrays(), min_count)
        runs.append(time.perf_counter() - started)
    return float(np.median(runs))


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m simulations.bench_reorder", description=__doc__)
    parser.add_argument("--window", type=int, default=100_000)
    parser.add_argument("--min-support", default="0.005")
    args = parser.parse_args(argv)
    lists = load_baskets("quest", 2 * args.window, seed=2)
    n_items = max(max(b) for b in lists) + 1
    shuffle = np.random.default_rng(5).permutation(n_items)
    first = BasketArrays.from_lists(lists[: args.window])
    second = BasketArrays.from_lists(lists[args.window :])
    second = BasketArrays(shuffle[second.items], second.start)
    old_rank = frequency_rank(np.bincount(first.items, minlength=n_items))
    new_rank = frequency_rank(np.bincount(second.items, minlength=n_items))
    min_count = int(np.ceil(Fraction(args.min_support) * args.window))
    log("building the stale and the fresh tree")
    stale, _ = build(second, old_rank)
    fresh, rebuild_s = build(second, new_rank)
    sample = second.select(np.arange(args.window - ORDER_SAMPLE, args.window))
    stale_sample, _ = build(sample, old_rank)
    fresh_sample, _ = build(sample, new_rank)
    log("mining both")
    stale_mine, fresh_mine = timed_mine(stale, min_count), timed_mine(fresh, min_count)
    saving = stale_mine - fresh_mine
    report = {
        "environment": environment(),
        "window": args.window,
        "min_count": min_count,
        "nodes": {"stale_order": stale.node_count(), "current_order": fresh.node_count()},
        "node_ratio": round(stale.node_count() / fresh.node_count(), 3),
        "sampled_node_ratio": round(stale_sample.node_count() / fresh_sample.node_count(), 3),
        "full_mine_s": {"stale_order": round(stale_mine, 4), "current_order": round(fresh_mine, 4)},
        "rebuild_s": round(rebuild_s, 4),
        "full_mines_to_repay_rebuild": round(rebuild_s / saving, 1) if saving > 0 else None,
    }
    json.dump(report, sys.stdout, indent=1)
    print()
    return 0


if __name__ == "__main__":
    sys.exit(main())
