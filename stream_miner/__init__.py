"""stream-miner: exact sliding-window association-rule mining of shopping baskets.

The public API for embedding the engine in a Python service; everything not listed in
``__all__`` is internal and may change between releases.
"""

from stream_miner.engine.delta import ResultDelta
from stream_miner.engine.hygiene import BasketPolicy, Oversize, Verdict
from stream_miner.engine.limits import MiningInterrupted, ResultTooLarge
from stream_miner.engine.miner import MinerState, Tick, WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.result import MiningResult
from stream_miner.engine.rules import Rule, RuleFilter
from stream_miner.engine.window import CountWindow, TimeWindow
from stream_miner.runtime.checkpoint import CheckpointError, load_checkpoint, save_checkpoint

__version__ = "0.2.0"

__all__ = [
    "BasketPolicy",
    "CheckpointError",
    "CountWindow",
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
