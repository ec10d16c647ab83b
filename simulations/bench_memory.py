"""Child process of the engine benchmark: peak memory of a window tree fed from a FIMI file.

Run in a fresh interpreter so that nothing else inflates the resident set size (RSS); the
peak is the process image's high-water mark (VmHWM), which a fresh exec resets:

    python -m simulations.bench_memory engine --file F --window W [--baskets N] [--batch B]
    python -m simulations.bench_memory naive --file F --baskets N

``engine`` streams the file line by line, applying batches to a PrefixTree with a
WindowStore and count-window expiry, as WindowMiner does. ``naive`` builds the object-per-node
tree of simulations.naive from the first N baskets. Prints one JSON object to stdout.
"""

from __future__ import annotations

import argparse
import json
import resource
import sys
from collections import Counter
from collections.abc import Iterator, Sequence
from itertools import chain, islice

import numpy as np
import psutil

from simulations.naive import NaiveFPTree
from stream_miner.engine.tree import PrefixTree, frequency_rank
from stream_miner.engine.window import WindowStore

Baskets = list[list[int]]


def current_rss() -> int:
    """Resident set size of this process now, in bytes."""
    return int(psutil.Process().memory_info().rss)


def peak_rss() -> int:
    """Peak resident set size of this process image so far, in bytes (VmHWM, Linux).

    Not ru_maxrss: Linux carries the parent's peak over fork and exec into the child's
    ru_maxrss, so a child of a big benchmark process would report the parent's peak.
    """
    with open("/proc/self/status", encoding="ascii") as status:
        for line in status:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) * 1024
    raise RuntimeError("no VmHWM in /proc/self/status")


def ru_maxrss() -> int:
    """getrusage's peak RSS in bytes (KiB on Linux); includes the parent's peak at fork."""
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024


def read_baskets(path: str, limit: int | None) -> Iterator[list[int]]:
    """Baskets of a FIMI file (one line of item ids each), one at a time."""
    with open(path, encoding="utf-8") as lines:
        for line in islice(lines, limit):
            yield [int(item) for item in line.split()]


def batches(baskets: Iterator[list[int]], size: int) -> Iterator[Baskets]:
    """Group a basket stream into lists of ``size`` baskets (the last may be shorter)."""
    while batch := list(islice(baskets, size)):
        yield batch


def engine_memory(path: str, window: int, limit: int | None, batch: int) -> dict[str, object]:
    """Stream the file through a count window of ``window`` baskets; report memory figures.

    The item order is the frequency order of the first batch, as in the engine.
    """
    baseline, baseline_peak = current_rss(), peak_rss()
    tree: PrefixTree | None = None
    store = WindowStore()
    streamed = 0
    for chunk in batches(read_baskets(path, limit), min(batch, window)):
        if tree is None:
            first = np.fromiter(chain.from_iterable(chunk), dtype=np.int64)
            tree = PrefixTree(frequency_rank(np.bincount(first)))
        expired = store.expire_oldest(max(0, len(store) + len(chunk) - window))
        paths = tree.paths_of(chunk)
        handles = tree.update(paths, expired.handles)
        store.append(paths, np.full(len(chunk), np.nan), handles)
        streamed += len(chunk)
    if tree is None:
        raise ValueError(f"no baskets in {path}")
    peak, final, n = peak_rss(), current_rss(), len(store)
    nodes, tree_bytes, store_bytes = tree.node_count(), tree.nbytes(), store.nbytes
    return {
        "window_baskets": n,
        "streamed_baskets": streamed,
        "batch": min(batch, window),
        "item_order": "frequency of the first batch",
        "baseline_rss_bytes": baseline,
        "baseline_peak_rss_bytes": baseline_peak,
        "peak_rss_bytes": peak,
        "ru_maxrss_bytes": ru_maxrss(),
        "final_rss_bytes": final,
        "node_count": nodes,
        "tree_nbytes": tree_bytes,
        "store_nbytes": store_bytes,
        "peak_rss_per_basket": peak / n,
        "peak_minus_baseline_per_basket": (peak - baseline) / n,
        "final_minus_baseline_per_basket": (final - baseline) / n,
        "tree_nbytes_per_basket": tree_bytes / n,
        "tree_nbytes_per_node": tree_bytes / nodes,
        "store_nbytes_per_basket": store_bytes / n,
        "nodes_per_basket": nodes / n,
    }


def naive_memory(path: str, n: int) -> dict[str, object]:
    """Build the naive tree from the first ``n`` baskets (their own frequency order)."""
    counts = Counter(chain.from_iterable(read_baskets(path, n)))
    item_count = np.zeros(max(counts) + 1, dtype=np.int64)
    item_count[list(counts)] = list(counts.values())
    rank = frequency_rank(item_count).tolist()
    baseline = current_rss()
    tree = NaiveFPTree()
    inserted = 0
    for basket in read_baskets(path, n):
        tree.insert(sorted(basket, key=rank.__getitem__))
        inserted += 1
    peak, nodes = peak_rss(), tree.node_count()
    return {
        "baskets": inserted,
        "item_order": "frequency of these baskets",
        "baseline_rss_bytes": baseline,
        "peak_rss_bytes": peak,
        "ru_maxrss_bytes": ru_maxrss(),
        "node_count": nodes,
        "peak_minus_baseline_per_basket": (peak - baseline) / inserted,
        "peak_minus_baseline_per_node": (peak - baseline) / nodes,
        "nodes_per_basket": nodes / inserted,
    }


def main(argv: Sequence[str] | None = None) -> int:
    """Parse arguments, measure and print one JSON object."""
    parser = argparse.ArgumentParser(prog="python -m simulations.bench_memory", description=__doc__)
    parser.add_argument("tree", choices=["engine", "naive"])
    parser.add_argument("--file", required=True, help="FIMI file: one basket of item ids a line")
    parser.add_argument("--window", type=int, help="engine: window size in baskets")
    parser.add_argument("--baskets", type=int, help="baskets to read (engine default: all)")
    parser.add_argument("--batch", type=int, default=10_000, help="engine: baskets per update")
    args = parser.parse_args(argv)
    if args.tree == "engine":
        if args.window is None or args.window < 1 or args.batch < 1:
            parser.error("engine needs --window >= 1 and --batch >= 1")
        result = engine_memory(args.file, args.window, args.baskets, args.batch)
    else:
        if args.baskets is None or args.baskets < 1:
            parser.error("naive needs --baskets >= 1")
        result = naive_memory(args.file, args.baskets)
    print(json.dumps(result))
    return 0


if __name__ == "__main__":
    sys.exit(main())
