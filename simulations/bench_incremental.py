"""Incremental tick benchmark: refresh cost per tick against full re-mining, in one run.

    python -m simulations.bench_incremental [--ticks 30] [--quick]

For each scenario a window is filled, the first tick starts the tracking (forced, so that its
cost is timed apart), and then every tick adds one batch of baskets (the slide) and refreshes
the tracked result. Beside the refresh, the
same run times this project's full mine of the same window and pyfim's C FP-growth on the
window's baskets at sampled ticks, and checks that all three agree. Figures are medians;
ratios matter (the machines are noisy). Prints one JSON object; progress on stderr.

Scenarios: Quest T10 I4 (1,000 items) at 0.5 % with windows of 100,000 and 1,000,000 and
slide sizes of 1,000 and 10,000 baskets; the heavy-tailed data set at 0.5 %; and the acceptance
setting of the command line (window 10,000, a tick every 500 baskets, 1 %) on both data sets.
The refresh is what ``mine --tick-every --tick-timings`` reports as ``refresh_ms``. The first
refresh in a process also pays numba's one-off start (loading the compiled loops).

:func:`mode_file` and :func:`time_modes` time whole ``stream-miner mine --tick-every``
processes per refresh mode, for ``python -m simulations.bench_performance``.
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import time
from collections.abc import Sequence
from fractions import Fraction

import fim

from simulations.bench_engine import CACHE_DIR, environment, load_baskets, log
from simulations.real_like import grocery_like_baskets, supermarket_like_baskets
from stream_miner.engine.compiled_start import load_compiled_loops
from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.refresh import Refresh
from stream_miner.engine.window import CountWindow

SCENARIOS = {
    "quest_w100k_s1k": ("quest", 100_000, 1_000, "0.005"),
    "quest_w1m_s1k": ("quest", 1_000_000, 1_000, "0.005"),
    "quest_w100k_s10k": ("quest", 100_000, 10_000, "0.005"),
    "heavy_w100k_s1k": ("heavy", 100_000, 1_000, "0.005"),
    "quest_w10k_s500_cli_setting": ("quest", 10_000, 500, "0.01"),
    "heavy_w10k_s500_cli_setting": ("heavy", 10_000, 500, "0.01"),
}
QUICK = ("quest_w100k_s1k", "quest_w10k_s500_cli_setting")
REAL_LIKE = {"grocery": grocery_like_baskets, "supermarket": supermarket_like_baskets}
MODES = {"default": [], "full_remine": ["--full-remine"], "always_track": ["--always-track"]}


def run_scenario(
    data: str, window: int, slide: int, support: str, ticks: int, samples: int, seed: int
) -> dict:
    """Fill, start tracking, then time ``ticks`` tracked refreshes and sampled full mines."""
    baskets = load_baskets(data, window + slide * ticks, seed=seed)
    vocabulary = [str(i) for i in range(max(max(b) for b in baskets) + 1)]
    named = [[vocabulary[i] for i in b] for b in baskets]
    miner = WindowMiner(CountWindow(window))
    params = MiningParams(min_support=Fraction(support))
    for basket in named[:window]:
        miner.add(basket)
    started = time.perf_counter()
    miner.tick(params, refresh=Refresh.TRACKED)
    start = time.perf_counter() - started
    sample_at = {round(k * (ticks - 1) / max(1, samples - 1)) for k in range(samples)}
    apply, refresh, full, pyfim, sizes = [], [], [], [], []
    for t in range(ticks):
        end = window + (t + 1) * slide
        for basket in named[end - slide : end]:
            miner.add(basket)
        started = time.perf_counter()
        miner.flush()
        apply.append(time.perf_counter() - started)
        started = time.perf_counter()
        result = miner.tick(params, refresh=Refresh.TRACKED).result
        refresh.append(time.perf_counter() - started)
        sizes.append(len(result.itemsets))
        if t in sample_at:
            started = time.perf_counter()
            again = miner.mine(params)
            full.append(time.perf_counter() - started)
            window_baskets = baskets[end - window : end]
            started = time.perf_counter()
            reference = fim.fpgrowth(window_baskets, supp=-result.min_count, report="a")
            pyfim.append(time.perf_counter() - started)
            reference = {tuple(sorted(vocabulary[i] for i in s)): c for s, c in reference}
            if not result.itemsets == again.itemsets == reference:
                raise AssertionError(f"incremental, full and pyfim results differ at tick {t}")
    refresh_s = statistics.median(refresh)
    return {
        "data": data,
        "window": window,
        "slide": slide,
        "min_support": support,
        "ticks": ticks,
        "frequent_itemsets_median": statistics.median(sizes),
        "start_tracking_s": round(start, 4),
        "refresh_per_tick_s": round(refresh_s, 4),
        "refresh_mean_s": round(statistics.fmean(refresh), 4),
        "refresh_per_tick_p90_s": round(sorted(refresh)[int(0.9 * (len(refresh) - 1))], 4),
        "tree_update_per_tick_s": round(statistics.median(apply), 4),
        "full_mine_s": round(statistics.median(full), 4),
        "pyfim_s": round(statistics.median(pyfim), 4),
        "full_over_refresh": round(statistics.median(full) / refresh_s, 2),
        "start_over_full": round(start / statistics.median(full), 2),
        "pyfim_over_refresh": round(statistics.median(pyfim) / refresh_s, 2),
        "checked_ticks": sorted(sample_at),
    }


def warm_up() -> float:
    """Seconds to load the compiled loops (numba, from its cache), kept out of the scenarios'
    first ticks: a tiny window's tick no longer loads them (it stays in numpy)."""
    started = time.perf_counter()
    load_compiled_loops()
    return round(time.perf_counter() - started, 4)


def mode_file(data: str, n: int, seed: int) -> str:
    """A FIMI file of ``n`` baskets of the named generated set ("grocery" and "supermarket"
    are the stand-ins of simulations.real_like)."""
    if data in REAL_LIKE:
        baskets = [[str(i) for i in b] for b in REAL_LIKE[data](n, seed=seed)]
    else:
        baskets = [[str(i) for i in b] for b in load_baskets(data, n, seed=seed)]
    path = CACHE_DIR / f"modes-{data}-n{n}-seed{seed}.dat"
    CACHE_DIR.mkdir(parents=True, exist_ok=True)
    path.write_text("".join(" ".join(b) + "\n" for b in baskets if b))
    return str(path)


def time_modes(path: str, window: int, every: int, support: str, repeats: int) -> dict:
    """Whole-process seconds of ``mine --tick-every`` on a FIMI file per mode (medians of
    interleaved runs), with identical output checked, and the default over the better forced mode."""
    command = [sys.executable, "-m", "stream_miner", "mine", path, "--format", "fimi", "--json"]
    command += ["--window-size", str(window), "--tick-every", str(every), "--min-support", support]
    seconds: dict[str, list[float]] = {mode: [] for mode in MODES}
    outputs = set()
    for _ in range(repeats):
        for mode, flags in MODES.items():
            started = time.perf_counter()
            done = subprocess.run(command + flags, capture_output=True, check=True)
            seconds[mode].append(time.perf_counter() - started)
            outputs.add(hash(done.stdout))
    if len(outputs) != 1:
        raise AssertionError(f"{path}: the modes printed different results")
    medians = {mode: round(statistics.median(times), 3) for mode, times in seconds.items()}
    best = min(medians["full_remine"], medians["always_track"])
    return {
        "window": window,
        "tick_every": every,
        "min_support": support,
        "whole_process_s": medians,
        "default_over_better_forced": round(medians["default"] / best, 2),
    }


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m simulations.bench_incremental", description=__doc__)
    parser.add_argument("--ticks", type=int, default=30, help="timed ticks per scenario")
    parser.add_argument("--samples", type=int, default=3, help="ticks with full mine and pyfim")
    parser.add_argument("--quick", action="store_true", help=f"only {', '.join(QUICK)}")
    parser.add_argument("--only", choices=sorted(SCENARIOS), action="append")
    parser.add_argument("--seed", type=int, default=1, help="data seed (another seed gives held-out data)")
    args = parser.parse_args(argv)
    chosen = args.only or (QUICK if args.quick else list(SCENARIOS))
    report: dict = {
        "environment": environment(),
        "seed": args.seed,
        "compiled_loops_start_s": warm_up(),
        "scenarios": {},
    }
    for name in chosen:
        log(f"scenario {name}")
        report["scenarios"][name] = run_scenario(*SCENARIOS[name], args.ticks, args.samples, args.seed)
    scenarios = report["scenarios"]
    if "quest_w100k_s1k" in scenarios and "quest_w1m_s1k" in scenarios:
        report["window_1m_over_100k_refresh"] = round(
            scenarios["quest_w1m_s1k"]["refresh_per_tick_s"]
            / scenarios["quest_w100k_s1k"]["refresh_per_tick_s"],
            2,
        )
    json.dump(report, sys.stdout, indent=1)
    print()
    return 0


if __name__ == "__main__":
    sys.exit(main())
