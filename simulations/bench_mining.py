"""Full-mine benchmark: our miner beside pyfim and mlxtend on four kinds of data, with rules.

    python -m simulations.bench_mining [--repeats 3] [--skip-mlxtend] [--only NAME ...]

Data sets (generated, cached in the temp dir by simulations.bench_engine's cache):
Quest-like (T10 I4 N1000), heavy-tailed with a few 200-item baskets, sparse (Quest T5 with
10,000 items) and dense (Weka's supermarket.arff when present, see
simulations.drift_on_real_data). For each: seconds (median of the repeats, side by side in
one process) of ``mine_tree`` on the window's tree, of ``WindowMiner.mine`` (itemsets named),
of pyfim's and mlxtend's FP-growth, of ``WindowMiner.mine`` with rules, and of the rules alone
(``generate_rules`` on the mined itemsets), with the ratios. All must find the same itemsets.
The compiled loop's first-run cost is measured in a child process with an empty numba cache (cold) and again
with the cache it left (warm). Prints one JSON object to stdout.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import subprocess
import sys
import tempfile
from collections.abc import Callable, Sequence
from fractions import Fraction
from pathlib import Path

import fim

from simulations.bench_engine import load_baskets, median_runs
from simulations.drift_on_real_data import read_arff
from stream_miner.engine.fpgrowth import mine_tree
from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.rules import RuleFilter, generate_rules
from stream_miner.engine.window import CountWindow
from stream_miner.simulate.quest import quest_baskets

SUPERMARKET = Path("/tmp/realdata/weka/usr/share/doc/weka/examples/supermarket.arff")
COLD_SCRIPT = """
import time
from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.params import MiningParams
miner = WindowMiner()
for basket in [["a", "b", "c"], ["a", "b"], ["b", "c"]] * 3:
    miner.add(basket)
started = time.perf_counter()
miner.mine(MiningParams(min_count=2))
print(time.perf_counter() - started)
"""


def datasets() -> dict[str, tuple[list[list[str]], float, Fraction]]:
    """Name -> (baskets as item-name lists, min support, min confidence) of every available data set."""
    named = lambda baskets: [[str(i) for i in b] for b in baskets]  # noqa: E731
    out = {
        "quest": (named(load_baskets("quest", 20_000, 0)), 0.005, Fraction(1, 2)),
        "heavy": (named(load_baskets("heavy", 20_000, 0)), 0.002, Fraction(1, 2)),
        "sparse": (
            named(quest_baskets(20_000, seed=6, avg_size=5, n_items=10_000, n_patterns=5_000)),
            0.001,
            Fraction(1, 2),
        ),
    }
    if SUPERMARKET.exists():
        out["dense"] = (read_arff(SUPERMARKET), 0.05, Fraction(9, 10))
    return out


def median_seconds(run: Callable[[], object], repeats: int) -> float:
    return median_runs(run, repeats)[0]


def mlxtend_mine(baskets: list[list[str]], support: float) -> int:
    import pandas as pd
    from mlxtend.frequent_patterns import fpgrowth
    from mlxtend.preprocessing import TransactionEncoder

    encoder = TransactionEncoder()
    frame = pd.DataFrame(encoder.fit(baskets).transform(baskets), columns=encoder.columns_)
    return len(fpgrowth(frame, min_support=support))


def cold_and_warm() -> dict[str, float]:
    """Seconds of a tiny mine in fresh processes: with an empty numba cache, then warm."""
    with tempfile.TemporaryDirectory() as cache:
        env = {**os.environ, "NUMBA_CACHE_DIR": cache}
        runs = [
            float(
                subprocess.run(
                    [sys.executable, "-c", COLD_SCRIPT], env=env, capture_output=True, text=True, check=True
                ).stdout
            )
            for _ in range(2)
        ]
    return {"cold_s": runs[0], "warm_s": runs[1]}


def bench(
    name: str, baskets: list[list[str]], support: float, confidence: Fraction, repeats: int, mlxtend: bool
) -> dict:
    miner = WindowMiner(CountWindow(len(baskets)))
    for basket in baskets:
        miner.add(basket)
    min_count = math.ceil(support * len(baskets) - 1e-9)
    params = MiningParams(min_count=min_count)
    with_rules = MiningParams(min_count=min_count, rules=RuleFilter(min_confidence=confidence))
    miner.flush()
    tree = miner.tree.arrays()
    ours = mine_tree(tree, min_count)
    theirs = fim.fpgrowth(baskets, supp=-min_count, zmin=1, report="a")
    assert len(ours) == len(theirs), (name, len(ours), len(theirs))
    row = {
        "baskets": len(baskets),
        "min_support": support,
        "min_confidence": float(confidence),
        "itemsets": len(ours),
        "rules": len(miner.mine(with_rules).rules),
        "mine_tree_s": median_seconds(lambda: mine_tree(tree, min_count), repeats),
        "miner_mine_s": median_seconds(lambda: miner.mine(params), repeats),
        "pyfim_s": median_seconds(
            lambda: fim.fpgrowth(baskets, supp=-min_count, zmin=1, report="a"), repeats
        ),
        "mine_with_rules_s": median_seconds(lambda: miner.mine(with_rules), repeats),
    }
    mined = miner.mine(params)
    rules_only = lambda: generate_rules(mined.itemsets, mined.n_baskets, with_rules.rules)  # noqa: E731
    row["rules_s"] = median_seconds(rules_only, repeats)
    row["mine_tree_vs_pyfim"] = row["mine_tree_s"] / row["pyfim_s"]
    row["miner_mine_vs_pyfim"] = row["miner_mine_s"] / row["pyfim_s"]
    row["rules_vs_mining"] = row["rules_s"] / row["miner_mine_s"]
    if mlxtend:
        found = mlxtend_mine(baskets, min_count / len(baskets))
        assert found == len(ours), (name, found, len(ours))
        row["mlxtend_s"] = median_seconds(lambda: mlxtend_mine(baskets, min_count / len(baskets)), 1)
        row["mine_tree_vs_mlxtend"] = row["mine_tree_s"] / row["mlxtend_s"]
    print(f"{name}: " + ", ".join(f"{k} {v:.3g}" for k, v in row.items()), file=sys.stderr, flush=True)
    return row


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m simulations.bench_mining", description=__doc__)
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--skip-mlxtend", action="store_true")
    parser.add_argument("--only", nargs="*", help="data set names (default: all)")
    args = parser.parse_args(argv)
    report: dict[str, object] = {"compile": cold_and_warm()}
    for name, (baskets, support, confidence) in datasets().items():
        if not args.only or name in args.only:
            report[name] = bench(name, baskets, support, confidence, args.repeats, not args.skip_mlxtend)
    print(json.dumps(report, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
