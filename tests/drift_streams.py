"""Shared by the drift tests: the issue's window and thresholds, and a replay of a basket
stream through WindowMiner ticks into drift detectors (the engine, without the CLI)."""

from __future__ import annotations

import json
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from fractions import Fraction

from stream_miner.drift.detector import DriftDetector, DriftSettings
from stream_miner.drift.events import DriftEvent
from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.window import CountWindow

W, T = 2000, 200  # --window-size 2000 --tick-every 200
SETTINGS = DriftSettings(min_confidence=Fraction(1, 2), min_lift=Fraction(3, 2))
PARAMS = MiningParams(min_support=Fraction(5, 100))
RUN_OPTIONS = ["--window-size", str(W), "--tick-every", str(T), "--min-support", "0.05"]
RUN_OPTIONS += ["--min-confidence", "0.5", "--min-lift", "1.5"]


@dataclass(frozen=True)
class Seen:
    """An event and where the window ended when it was raised (baskets taken)."""

    end: int
    event: DriftEvent


def replay(
    rows: Iterable[Sequence[str]],
    detectors: Sequence[DriftDetector],
    *,
    round_trip: bool = False,
) -> list[list[Seen]]:
    """Feed every tick of ``rows`` to each detector (the same ticks); each one's events. With
    ``round_trip``, the last detector is rebuilt after every tick from its state passed
    through JSON (as a checkpoint carries it)."""
    miner = WindowMiner(CountWindow(W))
    found: list[list[Seen]] = [[] for _ in detectors]
    detectors = list(detectors)
    for i, basket in enumerate(rows, 1):
        miner.add(basket)
        if i % T:
            continue
        tick = miner.tick(PARAMS)
        for k, detector in enumerate(detectors):
            found[k].extend(Seen(i, event) for event in detector.follow(miner, tick))
        if round_trip:
            last = detectors[-1]
            detectors[-1] = DriftDetector.restored(json.loads(json.dumps(last.state())), last.settings)
    return found


def describe(seen: Sequence[Seen]) -> str:
    return "; ".join(f"{s.end} {s.event.kind} {s.event.items} p={s.event.p_value:.2g}" for s in seen)
