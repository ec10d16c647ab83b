"""What drift detection costs per tick beside the tick itself, in one run (ratios).

    python -m simulations.bench_drift

Two generated streams (``stream_miner.simulate.planted``): a sparse one (300 items, 4 a
basket, window 2,000, support 0.05, a tick every 200) and a dense one (60 items, 12 a
basket, window 3,000, support 0.05, a tick every 300). For each: seconds in ``miner.tick``
and in ``DriftDetector.follow`` over the whole stream, frequent itemsets at the last tick,
and the detector's time as a share of the tick's.
"""

from __future__ import annotations

import json
import time

from stream_miner import CountWindow, DriftDetector, DriftSettings, MiningParams, WindowMiner
from stream_miner.simulate.planted import Plant, baskets

STREAMS = {
    "sparse": dict(window=2000, every=200, support=0.05, n=14000, catalogue=300, mean_size=4.0, skew=1.1),
    "dense": dict(window=3000, every=300, support=0.05, n=9000, catalogue=60, mean_size=12.0, skew=0.8),
}
PLANTS = [Plant(("new-a", "new-b"), 0.1, start=6000), Plant(("old-x", "old-y"), 0.1, end=7000)]


def measure(window: int, every: int, support: float, n: int, **shape: float) -> dict[str, float]:
    miner = WindowMiner(CountWindow(window))
    detector = DriftDetector(DriftSettings(min_confidence=0.5, min_lift=1.5))
    params = MiningParams(min_support=support, max_itemsets=None)
    mining = detecting = 0.0
    itemsets = events = 0
    for i, basket in enumerate(baskets(n, PLANTS, seed=1, **shape), 1):  # type: ignore[arg-type]
        miner.add(basket)
        if i % every:
            continue
        started = time.perf_counter()
        tick = miner.tick(params)
        ticked = time.perf_counter()
        events += len(detector.follow(miner, tick))
        mining += ticked - started
        detecting += time.perf_counter() - ticked
        itemsets = len(tick.result.itemsets)
    return {
        "tick_seconds": round(mining, 3),
        "detector_seconds": round(detecting, 3),
        "detector_per_tick": round(detecting / mining, 2),
        "itemsets": itemsets,
        "events": events,
    }


def main() -> None:
    for name, shape in STREAMS.items():
        print(json.dumps({"stream": name, **measure(**shape)}))  # type: ignore[arg-type]


if __name__ == "__main__":
    main()
