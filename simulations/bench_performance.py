"""One rerunnable performance benchmark: full mine, ticks and Kafka, with the ratios that count.

    python -m simulations.bench_performance [--repeats 3] [--quick] [--only SECTION]
        [--skip-mlxtend-dense] [--json PATH]

Four generated data sets (simulations.datasets can write each to a file): Quest-like (T10 I4,
1,000 items), heavy-tailed with a few 200-item baskets, a sparse grocery-like set and a dense
supermarket-like set (about 100,000 frequent itemsets at 5 %). Sections, run in one process
tree, each competitor beside ours in the same run (medians of ``--repeats``; the ratios matter,
the machines are noisy):

- mining: our full mine in process (itemsets, then rules apart) beside pyfim's C FP-growth and
  mlxtend, all checked to find the same itemsets (simulations.bench_mining);
- ticks: whole ``stream-miner mine --tick-every`` processes in the default (adaptive) mode
  beside ``--full-remine`` and ``--always-track``, with identical output checked, and the
  refresh per tick against a full mine on Quest-like data (simulations.bench_incremental);
- kafka: ``stream-miner run`` from the test broker beside kafka-python alone consuming and
  decoding the same topic (simulations.bench_kafka).

Prints aligned tables; writes the raw figures as JSON (default
simulations/results/bench_performance.json).
"""

from __future__ import annotations

import argparse
import json
import platform
import sys
import time
import warnings
from collections.abc import Callable, Sequence
from fractions import Fraction
from pathlib import Path

import numba

from simulations import bench_incremental, bench_mining
from simulations.bench_engine import environment, load_baskets, log
from simulations.real_like import grocery_like_baskets, supermarket_like_baskets
from simulations.text_table import text_table
from stream_miner.engine.compiled_start import load_compiled_loops

SECTIONS = ("mining", "ticks", "kafka")
DEFAULT_JSON = Path(__file__).resolve().parent / "results" / "bench_performance.json"
SEED = 0
# name -> (baskets of a size, sizes, min supports, min confidence); full then --quick figures
MINING_SETS: dict[
    str, tuple[Callable[[int], list[list[int]]], tuple[int, int], tuple[float, float], Fraction]
] = {
    "quest": (lambda n: load_baskets("quest", n, SEED), (20_000, 2_000), (0.005, 0.01), Fraction(1, 2)),
    "heavy_big_baskets": (
        lambda n: load_baskets("heavy", n, SEED),
        (20_000, 2_000),
        (0.002, 0.01),
        Fraction(1, 2),
    ),
    "sparse_grocery_like": (
        lambda n: grocery_like_baskets(n, seed=SEED),
        (9_835, 2_000),
        (0.005, 0.01),
        Fraction(1, 2),
    ),
    "dense_supermarket_like": (
        lambda n: supermarket_like_baskets(n, seed=SEED),
        (4_627, 1_000),
        (0.05, 0.15),
        Fraction(9, 10),
    ),
}
# name -> (data for bench_incremental.mode_file, (baskets, window, tick every) full and quick, support)
TICK_SETS: dict[str, tuple[str, tuple[tuple[int, int, int], tuple[int, int, int]], str]] = {
    "quest": ("quest", ((30_000, 10_000, 500), (4_000, 2_000, 200)), "0.01"),
    "heavy_big_baskets": ("heavy", ((30_000, 10_000, 500), (4_000, 2_000, 200)), "0.01"),
    "sparse_grocery_like": ("grocery", ((9_835, 3_000, 200), (3_000, 1_000, 200)), "0.01"),
    "dense_supermarket_like": ("supermarket", ((4_627, 2_000, 200), (1_500, 500, 100)), "0.15"),
}
# Quest-like per-tick scenario: window, slide (1 %), support, ticks, sampled full mines
PER_TICK = ((100_000, 1_000, "0.005", 20, 3), (10_000, 100, "0.01", 10, 2))
KAFKA = ((200_000, 100_000), (20_000, 10_000))  # baskets, window


def mining_section(quick: bool, repeats: int, skip_mlxtend_dense: bool) -> tuple[float, dict]:
    """Full mine per data set beside pyfim and mlxtend (bench_mining.bench's row), with the
    compiled loops loaded first (as a long-running process has them; their one-off load is
    reported apart: a short ``mine`` starts in numpy instead)."""
    started = time.perf_counter()
    load_compiled_loops()
    load_seconds = round(time.perf_counter() - started, 3)
    out = {}
    for name, (make, sizes, supports, confidence) in MINING_SETS.items():
        log(f"mining: {name}")
        baskets = [[str(i) for i in b] for b in make(sizes[quick])]
        mlxtend = not (skip_mlxtend_dense and name.startswith("dense"))
        out[name] = bench_mining.bench(name, baskets, supports[quick], confidence, repeats, mlxtend)
    return load_seconds, out


def ticks_section(quick: bool, repeats: int) -> dict:
    """Whole ``mine --tick-every`` processes per mode, and the Quest-like refresh per tick."""
    modes = {}
    for name, (data, sizes, support) in TICK_SETS.items():
        n, window, every = sizes[quick]
        log(f"ticks: modes on {name}")
        path = bench_incremental.mode_file(data, n, SEED)
        modes[name] = bench_incremental.time_modes(path, window, every, support, repeats)
    window, slide, support, ticks, samples = PER_TICK[quick]
    log(f"ticks: Quest-like refresh per tick, window {window}, slide {slide}")
    bench_incremental.warm_up()
    per_tick = bench_incremental.run_scenario("quest", window, slide, support, ticks, samples, SEED)
    return {"modes": modes, "quest_per_tick": per_tick}


def kafka_section(quick: bool, repeats: int) -> dict:
    """``stream-miner run`` from the test broker beside kafka-python alone (rates per second)."""
    n, window = KAFKA[quick]
    log(f"kafka: {n} baskets, window {window}")
    with warnings.catch_warnings():  # kafka-python's own deprecated importlib calls, once per schema
        warnings.simplefilter("ignore", DeprecationWarning)
        from simulations import bench_kafka

        rates, _ = bench_kafka.measure(n, window, processes=1, repeats=repeats)
    return {
        "baskets": n,
        "window": window,
        "per_s": {name: round(rate) for name, rate in rates.items()},
        "run_over_raw_json": rates["run"] / rates["raw_json"],
        "run_sustained_over_raw_json": rates["run_sustained"] / rates["raw_json"],
        "run_over_raw_orjson": rates["run"] / rates["raw_orjson"],
    }


def table(header: Sequence[str], rows: Sequence[Sequence[object]]) -> str:
    """Columns aligned: the first to the left, the rest to the right."""
    cells = [list(header)] + [[_cell(v) for v in row] for row in rows]
    return "\n".join("  " + line for line in text_table(cells, first_left=True, rule=True))


def _cell(value: object) -> str:
    if isinstance(value, float):
        return f"{value:.3g}" if value < 100 else f"{value:,.0f}"
    if isinstance(value, int):
        return f"{value:,}"
    return str(value)


def render(report: dict) -> str:
    """The report as plain text: a header line, then one table per section run."""
    env = report["environment"]
    parts = [
        f"stream-miner performance | {env['cpus']} cores, load {env['load_average_at_start']}, "
        f"Python {env['python']}, numpy {env['numpy']}, numba {env['numba']} | {report['command']}"
    ]
    if "mining" in report:
        rows = [
            [
                name,
                r["baskets"],
                r["itemsets"],
                r["rules"],
                r["miner_mine_s"],
                r["rules_s"],
                r["pyfim_s"],
                r.get("mlxtend_s", "skipped"),
                r["miner_mine_vs_pyfim"],
                r["rules_vs_mining"],
            ]
            for name, r in report["mining"].items()
        ]
        head = ["data set", "baskets", "itemsets", "rules", "ours s", "rules s", "pyfim s", "mlxtend s"]
        parts += [
            "\n1. Full mine in process (seconds; ratios: ours / pyfim, rules / mining)",
            table([*head, "ours/pyfim", "rules/mine"], rows),
            f"   compiled loops loaded first: {report['compiled_loops_load_s']} s, once per process "
            "(a short mine starts in numpy instead)",
        ]
    if "ticks" in report:
        ticks = report["ticks"]
        rows = [
            [
                name,
                f"{r['window']}/{r['tick_every']}/{r['min_support']}",
                r["whole_process_s"]["default"],
                r["whole_process_s"]["full_remine"],
                r["whole_process_s"]["always_track"],
                r["default_over_better_forced"],
            ]
            for name, r in ticks["modes"].items()
        ]
        q = ticks["quest_per_tick"]
        parts += [
            "\n2. mine --tick-every, whole process (seconds; ratio: default / better forced mode)",
            table(
                ["data set", "window/every/support", "default", "full-remine", "always-track", "ratio"],
                rows,
            ),
            f"\n   Quest-like refresh per tick, window {q['window']:,}, slide {q['slide']:,}, "
            f"{round(q['frequent_itemsets_median']):,} itemsets (seconds; ratio: full mine / refresh)",
            table(
                [
                    "data set",
                    "start tracking",
                    "refresh",
                    "window update",
                    "full mine",
                    "pyfim",
                    "full/refresh",
                    "start/full",
                ],
                [
                    [
                        "quest",
                        q["start_tracking_s"],
                        q["refresh_per_tick_s"],
                        q["tree_update_per_tick_s"],
                        q["full_mine_s"],
                        q["pyfim_s"],
                        q["full_over_refresh"],
                        q["start_over_full"],
                    ]
                ],
            ),
        ]
    if "kafka" in report:
        k = report["kafka"]
        rate = k["per_s"]
        parts += [
            f"\n3. Kafka, one partition, window {k['window']:,}, a tick a second: {k['baskets']:,} baskets "
            "(baskets per second; ratios: run / kafka-python with json)",
            table(
                ["data set", "kafka-python+json", "+orjson", "run", "run sustained", "run", "sustained"],
                [
                    [
                        "quest",
                        rate["raw_json"],
                        rate["raw_orjson"],
                        rate["run"],
                        rate["run_sustained"],
                        k["run_over_raw_json"],
                        k["run_sustained_over_raw_json"],
                    ]
                ],
            ),
        ]
    if report.get("mlxtend_skipped"):
        parts.append("\nmlxtend skipped on the dense set (--skip-mlxtend-dense).")
    return "\n".join(parts)


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m simulations.bench_performance", description=__doc__)
    parser.add_argument("--repeats", type=int, default=3, help="runs per measurement (medians)")
    parser.add_argument("--quick", action="store_true", help="small sizes: a smoke test of a few minutes")
    parser.add_argument("--only", choices=SECTIONS, action="append", help="this section only (repeatable)")
    parser.add_argument("--skip-mlxtend-dense", action="store_true", help="no mlxtend on the dense set")
    parser.add_argument("--json", type=Path, default=DEFAULT_JSON, help="raw figures (default: %(default)s)")
    args = parser.parse_args(argv)
    if args.repeats < 1:
        parser.error("--repeats must be >= 1")
    arguments = sys.argv[1:] if argv is None else list(argv)
    report: dict = {
        "command": " ".join(["python -m simulations.bench_performance", *arguments]),
        "environment": environment() | {"numba": numba.__version__, "machine": platform.machine()},
        "quick": args.quick,
        "mlxtend_skipped": args.skip_mlxtend_dense,
    }
    chosen = args.only or SECTIONS
    if "mining" in chosen:
        load_seconds, report["mining"] = mining_section(args.quick, args.repeats, args.skip_mlxtend_dense)
        report["compiled_loops_load_s"] = load_seconds
    if "ticks" in chosen:
        report["ticks"] = ticks_section(args.quick, args.repeats)
    if "kafka" in chosen:
        report["kafka"] = kafka_section(args.quick, args.repeats)
    args.json.parent.mkdir(parents=True, exist_ok=True)
    args.json.write_text(json.dumps(report, indent=1, default=_json_default) + "\n")
    print(render(report))
    print(f"\nraw figures: {args.json}")
    return 0


def _json_default(value: object) -> object:
    """Fractions as floats in the JSON figures."""
    if isinstance(value, Fraction):
        return float(value)
    raise TypeError(f"not JSON serialisable: {type(value).__name__}")


if __name__ == "__main__":
    sys.exit(main())
