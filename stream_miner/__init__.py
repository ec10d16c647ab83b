"""stream-miner: exact sliding-window association-rule mining of shopping baskets.

The public API for embedding the engine in a Python service; everything not listed in
``__all__`` is internal and may change between releases. Names are imported on first use,
so ``import stream_miner`` (and the command line's start) stays quick.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

__version__ = "0.4.0"

_HOMES = {
    "BasketPolicy": "stream_miner.engine.hygiene",
    "CheckpointError": "stream_miner.runtime.checkpoint",
    "CountWindow": "stream_miner.engine.window",
    "DriftDetector": "stream_miner.drift.detector",
    "DriftEvent": "stream_miner.drift.events",
    "DriftSettings": "stream_miner.drift.detector",
    "MinerState": "stream_miner.engine.miner",
    "MiningInterrupted": "stream_miner.engine.limits",
    "MiningParams": "stream_miner.engine.params",
    "MiningResult": "stream_miner.engine.result",
    "Oversize": "stream_miner.engine.hygiene",
    "ResultDelta": "stream_miner.engine.delta",
    "ResultTooLarge": "stream_miner.engine.limits",
    "Rule": "stream_miner.engine.rules",
    "RuleFilter": "stream_miner.engine.rules",
    "Tick": "stream_miner.engine.miner",
    "TimeWindow": "stream_miner.engine.window",
    "Verdict": "stream_miner.engine.hygiene",
    "WindowMiner": "stream_miner.engine.miner",
    "load_checkpoint": "stream_miner.runtime.checkpoint",
    "save_checkpoint": "stream_miner.runtime.checkpoint",
}

__all__ = [
    "BasketPolicy",
    "CheckpointError",
    "CountWindow",
    "DriftDetector",
    "DriftEvent",
    "DriftSettings",
    "MinerState",
    "MiningInterrupted",
    "MiningParams",
    "MiningResult",
    "Oversize",
    "ResultDelta",
    "ResultTooLarge",
    "Rule",
    "RuleFilter",
    "Tick",
    "TimeWindow",
    "Verdict",
    "WindowMiner",
    "__version__",
    "load_checkpoint",
    "save_checkpoint",
]


def __getattr__(name: str) -> Any:
    """Import a public name from its module on first use."""
    if name not in _HOMES:
        raise AttributeError(f"module 'stream_miner' has no attribute {name!r}")
    value = getattr(importlib.import_module(_HOMES[name]), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return __all__


if TYPE_CHECKING:
    from stream_miner.drift.detector import DriftDetector, DriftSettings
    from stream_miner.drift.events import DriftEvent
    from stream_miner.engine.delta import ResultDelta
    from stream_miner.engine.hygiene import BasketPolicy, Oversize, Verdict
    from stream_miner.engine.limits import MiningInterrupted, ResultTooLarge
    from stream_miner.engine.miner import MinerState, Tick, WindowMiner
    from stream_miner.engine.params import MiningParams
    from stream_miner.engine.result import MiningResult
    from stream_miner.engine.rules import Rule, RuleFilter
    from stream_miner.engine.window import CountWindow, TimeWindow
    from stream_miner.runtime.checkpoint import CheckpointError, load_checkpoint, save_checkpoint
