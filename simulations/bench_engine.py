"""Engine benchmark: the window tree and its miner against naive and library competitors.

    python -m simulations.bench_engine [--baskets 200000] [--window 100000]
        [--min-support 0.005] [--slide 10000] [--repeats 3] [--naive-repeats 1]
        [--data quest|heavy] [--skip-mlxtend] [--memory-window 1000000] [--seed 0]

Competitors run side by side in one process (the machine is noisy, so ratios matter more
than absolute figures); each timing is the median of its repeats. Sections:

- compactness: tree nodes per basket of the first window under three item orders;
- throughput: insert+expire rate of PrefixTree.update in slides, of the naive object tree
  one basket at a time, and end to end through WindowMiner.add (names as strings);
- mining: mine_tree on the first window's tree against mlxtend, pyfim and the naive
  FP-growth, all checked to find exactly the same itemsets and counts;
- memory (Quest only; --memory-window 0 skips it): peak RSS per windowed basket, measured
  in fresh child processes (simulations.bench_memory) that stream a FIMI file.

Generated data sets are cached under the system temp dir. Prints one JSON object to stdout,
progress to stderr.
"""

from __future__ import annotations

import argparse
import gc
import hashlib
import inspect
import itertools
import json
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable, Sequence
from fractions import Fraction
from pathlib import Path
from typing import TypeVar

import fim
import numpy as np
import pandas as pd
from mlxtend.frequent_patterns import fpgrowth
from mlxtend.preprocessing import TransactionEncoder

from simulations.heavy_tailed import heavy_tailed_baskets
from simulations.naive import NaiveFPTree, naive_fpgrowth
from stream_miner.engine.fpgrowth import mine_tree
from stream_miner.engine.miner import DEFAULT_BATCH, WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.tree import PrefixTree, frequency_rank
from stream_miner.engine.window import CountWindow
from stream_miner.simulate.quest import quest_baskets

Baskets = list[list[int]]
Itemsets = dict[tuple[int, ...], int]
T = TypeVar("T")

CACHE_DIR = Path(tempfile.gettempdir()) / "stream-miner-bench"
HEAVY_BIG_BASKET_RATE = 0.001
BASE_SLIDES = (1_000, 10_000)
MEMORY_EXTRA = 100_000  # baskets streamed past a full memory window
MEMORY_BATCH = 10_000
DATASETS: dict[str, tuple[str, Callable[..., Baskets], dict[str, float]]] = {
    "quest": ("quest-T10-I4-N1000", quest_baskets, {}),
    "heavy": (
        f"heavy-big{HEAVY_BIG_BASKET_RATE}",
        heavy_tailed_baskets,
        {"big_basket_rate": HEAVY_BIG_BASKET_RATE},
    ),
}

_STARTED = time.perf_counter()


def log(message: str) -> None:
    """Progress line on stderr, with seconds since start."""
    print(f"[{time.perf_counter() - _STARTED:7.1f}s] {message}", file=sys.stderr, flush=True)


# ------------------------------------------------------------------------- data
def generate(data: str, n: int, seed: int) -> Baskets:
    """Generate ``n`` baskets of the named data set."""
    _, generator, options = DATASETS[data]
    return generator(n, seed=seed, **options)


def cache_path(data: str, n: int, seed: int, suffix: str) -> Path:
    """Cache file of a data set, keyed by its parameters and its generator's source code."""
    label, generator, _ = DATASETS[data]
    source = inspect.getsourcefile(generator)
    assert source is not None
    digest = hashlib.sha1(Path(source).read_bytes()).hexdigest()[:10]
    return CACHE_DIR / f"{label}-n{n}-seed{seed}-{digest}{suffix}"


def load_baskets(data: str, n: int, seed: int) -> Baskets:
    """Generated baskets, cached as CSR arrays in the temp dir."""
    path = cache_path(data, n, seed, ".npz")
    if path.exists():
        with np.load(path) as cached:
            flat, start = cached["items"].tolist(), cached["start"].tolist()
        return [flat[lo:hi] for lo, hi in itertools.pairwise(start)]
    log(f"generating {n} {data} baskets (seed {seed})")
    baskets = generate(data, n, seed)
    start = np.zeros(n + 1, dtype=np.int64)
    np.cumsum([len(b) for b in baskets], out=start[1:])
    items = np.fromiter((i for b in baskets for i in b), dtype=np.int32, count=int(start[-1]))
    CACHE_DIR.mkdir(parents=True, exist_ok=True)
    partial = path.with_suffix(".partial.npz")
    np.savez(partial, items=items, start=start)
    partial.replace(path)
    return baskets


def fimi_file(data: str, n: int, seed: int) -> Path:
    """A cached FIMI text file (one basket of item ids a line) of ``n`` generated baskets."""
    path = cache_path(data, n, seed, ".dat")
    if not path.exists():
        log(f"writing {n} {data} baskets to {path}")
        CACHE_DIR.mkdir(parents=True, exist_ok=True)
        partial = path.with_suffix(".partial")
        with open(partial, "w", encoding="utf-8") as out:
            out.writelines(" ".join(map(str, b)) + "\n" for b in generate(data, n, seed))
        partial.replace(path)
    return path


def describe(baskets: Baskets) -> dict[str, object]:
    """Size summary of a data set."""
    lengths = np.fromiter(map(len, baskets), dtype=np.int64, count=len(baskets))
    distinct = np.unique(np.fromiter((i for b in baskets for i in b), dtype=np.int64)).size
    return {
        "baskets": len(baskets),
        "mean_items": round(float(lengths.mean()), 3),
        "max_items": int(lengths.max()),
        "distinct_items": int(distinct),
    }


def item_rank(baskets: Baskets) -> np.ndarray:
    """Frequency order (descending count, ties by id) of the items of ``baskets``."""
    items = np.fromiter((i for b in baskets for i in b), dtype=np.int64)
    return frequency_rank(np.bincount(items))


def tree_paths(baskets: Baskets, rank: np.ndarray) -> Baskets:
    """Each basket's items in the tree order given by ``rank``."""
    batch = PrefixTree(rank).paths_of(baskets)
    flat, start = batch.items.tolist(), batch.start.tolist()
    return [flat[lo:hi] for lo, hi in itertools.pairwise(start)]


# ---------------------------------------------------------------------- timing
def timed(run: Callable[[], T]) -> tuple[float, T]:
    """Wall time of ``run()`` (after a garbage collection) and its result."""
    gc.collect()
    started = time.perf_counter()
    result = run()
    return time.perf_counter() - started, result


def median_runs(run: Callable[[], T], repeats: int) -> tuple[float, list[float], T]:
    """Median wall time over ``repeats`` runs, every run's time, and the last result."""
    times = []
    for _ in range(repeats):
        seconds, result = timed(run)
        times.append(seconds)
    return statistics.median(times), [round(t, 4) for t in times], result


def median_phases(runs: list[dict[str, float]]) -> dict[str, float]:
    """Per-key median of several runs' phase timings."""
    return {key: statistics.median(run[key] for run in runs) for key in runs[0]}


# ----------------------------------------------------------------- compactness
def compactness(window: Baskets) -> dict[str, object]:
    """Tree nodes for the window under whole-window, engine-policy and canonical item orders."""
    orders = {
        "window_frequency": item_rank(window),
        f"first_{DEFAULT_BATCH}_frequency": item_rank(window[:DEFAULT_BATCH]),  # engine policy
        "canonical_item_id": np.empty(0, dtype=np.int64),
    }
    out: dict[str, object] = {"baskets": len(window)}
    for name, rank in orders.items():
        nodes = PrefixTree.build(window, rank).node_count()
        out[name] = {"nodes": nodes, "nodes_per_basket": round(nodes / len(window), 4)}
    return out


# ------------------------------------------------------------------ throughput
def engine_stream(baskets: Baskets, window: int, slide: int, rank: np.ndarray) -> dict[str, float]:
    """Fill a window then slide through the rest, one tree.update per ``slide`` baskets."""
    tree = PrefixTree(rank)
    handles = np.empty(len(baskets), dtype=np.int64)
    gc.collect()
    started = time.perf_counter()
    for lo in range(0, window, slide):
        hi = min(lo + slide, window)
        handles[lo:hi] = tree.update(tree.paths_of(baskets[lo:hi]), ())
    filled = time.perf_counter()
    for lo in range(window, len(baskets), slide):
        hi = min(lo + slide, len(baskets))
        expired = handles[lo - window : hi - window]
        handles[lo:hi] = tree.update(tree.paths_of(baskets[lo:hi]), expired)
    done = time.perf_counter()
    return {"fill_s": filled - started, "slide_s": done - filled, "nodes": tree.node_count()}


def naive_stream(paths: Baskets, window: int) -> dict[str, float]:
    """The naive tree: insert a window of paths, then expire the oldest per path inserted."""
    tree = NaiveFPTree()
    gc.collect()
    started = time.perf_counter()
    for path in paths[:window]:
        tree.insert(path)
    filled = time.perf_counter()
    for old, new in zip(paths, paths[window:], strict=False):
        tree.expire(old)
        tree.insert(new)
    done = time.perf_counter()
    return {"fill_s": filled - started, "slide_s": done - filled, "nodes": tree.node_count()}


def miner_stream(names: list[list[str]], window: int) -> dict[str, float]:
    """WindowMiner.add over named baskets; the slide phase ends with the final flush."""
    miner = WindowMiner(CountWindow(window))
    gc.collect()
    started = time.perf_counter()
    for basket in names[:window]:
        miner.add(basket)
    filled = time.perf_counter()
    for basket in names[window:]:
        miner.add(basket)
    size = len(miner)  # flushes the pending batch
    done = time.perf_counter()
    if size != window:
        raise RuntimeError(f"WindowMiner holds {size} baskets, expected {window}")
    return {"fill_s": filled - started, "slide_s": done - filled, "nodes": miner.tree.node_count()}


def rates(phases: dict[str, float], window: int, slid: int) -> dict[str, float]:
    """Baskets per second of the fill (insert only) and slide (insert + expire) phases."""
    return {
        "fill_baskets_per_s": round(window / phases["fill_s"]),
        "slide_baskets_per_s": round(slid / phases["slide_s"]),
        "overall_baskets_per_s": round((window + slid) / (phases["fill_s"] + phases["slide_s"])),
        "fill_s": round(phases["fill_s"], 4),
        "slide_s": round(phases["slide_s"], 4),
        "nodes_at_end": int(phases["nodes"]),
    }


def throughput(baskets: Baskets, args: argparse.Namespace) -> dict[str, object]:
    """Engine (per slide size), naive and WindowMiner stream rates, with ratios."""
    window, slid = args.window, len(baskets) - args.window
    rank = item_rank(baskets[:window])
    engine: dict[str, dict[str, float]] = {}
    engine_runs: dict[str, list[float]] = {}
    for slide in sorted({*BASE_SLIDES, args.slide}):
        log(f"throughput: engine tree, slide {slide}")
        runs = [engine_stream(baskets, window, slide, rank) for _ in range(args.repeats)]
        engine[f"slide_{slide}"] = rates(median_phases(runs), window, slid)
        engine_runs[f"slide_{slide}"] = [round(run["slide_s"], 4) for run in runs]
    log("throughput: naive tree, one basket at a time")
    paths = tree_paths(baskets, rank)
    naive_runs = [naive_stream(paths, window) for _ in range(args.naive_repeats)]
    naive = rates(median_phases(naive_runs), window, slid)
    del paths
    check_same_nodes(engine, naive)
    log("throughput: WindowMiner.add end to end")
    names = [[str(item) for item in basket] for basket in baskets]
    miner_runs = [miner_stream(names, window) for _ in range(args.repeats)]
    miner = rates(median_phases(miner_runs), window, slid)
    default = engine[f"slide_{args.slide}"]
    return {
        "window": window,
        "slid_baskets": slid,
        "item_order": "frequency of the first window (engine tree and naive tree alike)",
        "engine_tree_update": engine,
        "engine_tree_update_slide_s_runs": engine_runs,
        "naive_tree": naive,
        "engine_over_naive_slide": {
            key: round(value["slide_baskets_per_s"] / naive["slide_baskets_per_s"], 2)
            for key, value in engine.items()
        },
        "engine_over_naive_fill": {
            key: round(value["fill_baskets_per_s"] / naive["fill_baskets_per_s"], 2)
            for key, value in engine.items()
        },
        "window_miner_add": {
            **miner,
            "batch_size": DEFAULT_BATCH,
            "item_order": f"frequency of the first {DEFAULT_BATCH} baskets (engine policy)",
            "over_naive_slide": round(miner["slide_baskets_per_s"] / naive["slide_baskets_per_s"], 2),
            f"over_tree_update_slide_{args.slide}": round(
                miner["slide_baskets_per_s"] / default["slide_baskets_per_s"], 3
            ),
        },
    }


def check_same_nodes(engine: dict[str, dict[str, float]], naive: dict[str, float]) -> None:
    """Both trees end holding the same window in the same order: node counts must agree."""
    for key, value in engine.items():
        if value["nodes_at_end"] != naive["nodes_at_end"]:
            raise RuntimeError(
                f"engine tree ({key}) ends with {value['nodes_at_end']} nodes, "
                f"the naive tree with {naive['nodes_at_end']}"
            )


# ---------------------------------------------------------------------- mining
def mlxtend_itemsets(window: Baskets, min_count: int, repeats: int) -> tuple[float, list[float], Itemsets]:
    """Time mlxtend fpgrowth (only the call) on a dense one-hot DataFrame of the window."""
    encoder = TransactionEncoder()
    onehot = pd.DataFrame(encoder.fit(window).transform(window), columns=encoder.columns_)
    support = min_count / len(window)
    median, runs, found = median_runs(lambda: fpgrowth(onehot, min_support=support), repeats)
    columns = encoder.columns_
    itemsets = {
        tuple(sorted(int(columns[c]) for c in itemset)): round(s * len(window))
        for itemset, s in zip(found["itemsets"], found["support"], strict=False)
    }
    return median, runs, itemsets


def check_same(name: str, found: Itemsets, expected: Itemsets) -> None:
    """Raise unless ``found`` has exactly the itemsets and counts of ``expected``."""
    if found == expected:
        return
    missing = expected.keys() - found.keys()
    extra = found.keys() - expected.keys()
    wrong = [k for k in expected.keys() & found.keys() if found[k] != expected[k]]
    example = (sorted(missing) or sorted(extra) or sorted(wrong))[0]
    raise RuntimeError(
        f"{name} disagrees with the engine: {len(missing)} missing, {len(extra)} extra, "
        f"{len(wrong)} with other counts; e.g. {example}: "
        f"engine {expected.get(example)}, {name} {found.get(example)}"
    )


def mining(window: Baskets, min_count: int, args: argparse.Namespace) -> dict[str, object]:
    """Full mine of the window: engine vs mlxtend, pyfim and naive FP-growth."""
    tree = PrefixTree.build(window, item_rank(window))
    log("mining: engine")
    arrays_s, _, _ = median_runs(tree.arrays, args.repeats)
    engine_s, engine_runs, expected = median_runs(lambda: mine_tree(tree.arrays(), min_count), args.repeats)
    times: dict[str, float] = {"engine": engine_s}
    runs: dict[str, list[float]] = {"engine": engine_runs}
    log("mining: pyfim")
    times["pyfim"], runs["pyfim"], pyfim_found = median_runs(
        lambda: fim.fpgrowth(window, supp=-min_count, report="a"), args.repeats
    )
    check_same("pyfim", {tuple(sorted(s)): int(c) for s, c in pyfim_found}, expected)
    if not args.skip_mlxtend:
        log("mining: mlxtend")
        times["mlxtend"], runs["mlxtend"], mlxtend_found = mlxtend_itemsets(window, min_count, args.repeats)
        check_same("mlxtend", mlxtend_found, expected)
    log("mining: naive FP-growth")
    times["naive"], runs["naive"], naive_found = median_runs(
        lambda: naive_fpgrowth(window, min_count), args.naive_repeats
    )
    check_same("naive", {tuple(sorted(s)): c for s, c in naive_found.items()}, expected)
    ratios = {"engine_over_pyfim": round(engine_s / times["pyfim"], 2)}
    if "mlxtend" in times:
        ratios["mlxtend_over_engine"] = round(times["mlxtend"] / engine_s, 2)
    ratios["naive_over_engine"] = round(times["naive"] / engine_s, 2)
    return {
        "window": len(window),
        "min_count": min_count,
        "frequent_itemsets": len(expected),
        "longest_itemset": max(map(len, expected), default=0),
        "tree_nodes": tree.node_count(),
        "same_itemsets_and_counts_as_engine": sorted(set(times) - {"engine"}),
        "seconds": {name: round(t, 4) for name, t in times.items()},
        "engine_tree_arrays_s": round(arrays_s, 4),
        "runs": runs,
        "ratios": ratios,
        "notes": "engine = mine_tree(tree.arrays(), min_count); mlxtend times fpgrowth only "
        "(dense bool one-hot DataFrame, use_colnames=False)",
    }


# ---------------------------------------------------------------------- memory
def child(*args: str) -> dict[str, object]:
    """Run simulations.bench_memory in a fresh interpreter and parse its JSON line."""
    command = [sys.executable, "-m", "simulations.bench_memory", *args]
    log("memory: " + " ".join(command[1:]))
    done = subprocess.run(command, check=True, stdout=subprocess.PIPE, text=True)
    result: dict[str, object] = json.loads(done.stdout)
    return result


def memory(args: argparse.Namespace) -> dict[str, object]:
    """Peak RSS per windowed basket (large and benchmark windows) and the naive tree's."""
    path = str(fimi_file("quest", args.memory_window + MEMORY_EXTRA, args.seed))
    engine = ("engine", "--file", path, "--batch", str(MEMORY_BATCH))
    large = child(*engine, "--window", str(args.memory_window))
    small = child(*engine, "--window", str(args.window), "--baskets", str(args.window + MEMORY_EXTRA))
    naive = child("naive", "--file", path, "--baskets", str(args.window))
    naive_bytes = naive["peak_minus_baseline_per_basket"]
    engine_peak = small["peak_minus_baseline_per_basket"]
    engine_final = small["final_minus_baseline_per_basket"]
    assert isinstance(naive_bytes, float)
    assert isinstance(engine_peak, float) and isinstance(engine_final, float)
    return {
        "data": f"quest, {args.memory_window + MEMORY_EXTRA} baskets streamed from {path}",
        f"engine_window_{args.memory_window}": large,
        f"engine_window_{args.window}": small,
        f"naive_{args.window}_baskets": naive,
        "naive_over_engine_peak_bytes_per_basket": round(naive_bytes / engine_peak, 2),
        "naive_over_engine_final_bytes_per_basket": round(naive_bytes / engine_final, 2),
        "notes": "bytes per basket above the child's RSS before loading data; the naive tree "
        "only inserts, so its peak is also its final size",
    }


# ------------------------------------------------------------------------ main
def parse_args(argv: Sequence[str] | None) -> argparse.Namespace:
    """Command-line options, validated."""
    parser = argparse.ArgumentParser(
        prog="python -m simulations.bench_engine",
        description=__doc__,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--baskets", type=int, default=200_000, help="baskets streamed")
    parser.add_argument("--window", type=int, default=100_000, help="window size in baskets")
    parser.add_argument("--min-support", type=Fraction, default=Fraction("0.005"))
    parser.add_argument("--slide", type=int, default=10_000, help="baskets per tree update")
    parser.add_argument("--repeats", type=int, default=3, help="runs of each fast measurement")
    parser.add_argument("--naive-repeats", type=int, default=1, help="runs of each naive one")
    parser.add_argument("--data", choices=sorted(DATASETS), default="quest")
    parser.add_argument("--skip-mlxtend", action="store_true")
    parser.add_argument("--memory-window", type=int, default=1_000_000, help="0 skips memory")
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args(argv)
    if not 0 < args.window < args.baskets:
        parser.error("need 0 < --window < --baskets")
    if min(args.slide, args.repeats, args.naive_repeats) < 1 or args.memory_window < 0:
        parser.error("--slide, --repeats and --naive-repeats must be >= 1, --memory-window >= 0")
    if not 0 < args.min_support <= 1:
        parser.error("--min-support must lie in (0, 1]")
    return args


def environment() -> dict[str, object]:
    """What the figures were measured on."""
    return {
        "python": platform.python_version(),
        "numpy": np.__version__,
        "cpus": os.cpu_count(),
        "load_average_at_start": [round(x, 2) for x in os.getloadavg()],
    }


def main(argv: Sequence[str] | None = None) -> int:
    """Run every section and print the report as one JSON object."""
    args = parse_args(argv)
    report: dict[str, object] = {"argv": sys.argv[1:] if argv is None else list(argv)}
    report["environment"] = environment()
    min_count = MiningParams(min_support=args.min_support).threshold(args.window)
    baskets = load_baskets(args.data, args.baskets, args.seed)
    window = baskets[: args.window]
    report["data"] = {"generator": DATASETS[args.data][0], "seed": args.seed, **describe(baskets)}
    log("compactness")
    report["compactness"] = compactness(window)
    report["throughput"] = throughput(baskets, args)
    report["mining"] = mining(window, min_count, args)
    if args.data == "quest" and args.memory_window:
        del baskets, window
        report["memory"] = memory(args)
    report["total_s"] = round(time.perf_counter() - _STARTED, 1)
    print(json.dumps(report, indent=2))
    return 0


if __name__ == "__main__":
    sys.exit(main())
