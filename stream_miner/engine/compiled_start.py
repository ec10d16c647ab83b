"""Loading numba's compiled loops ahead of need, for long-running processes.

Mines and ticks start in numpy and switch to the compiled loops once numpy has cost about what
loading them does (:mod:`stream_miner.engine.fpgrowth`,
:mod:`stream_miner.engine.incremental.kernels`): right for short commands, but in a long run
the switch falls inside the first large tick, which then waits for numba's start (1-3 s; far
longer when numba's disk cache is cold). A member reading Kafka loads them on a background
thread while it connects and joins its group, where it mostly waits for the broker.
"""

from __future__ import annotations

import contextlib
import threading

# a tiny window whose tracked ticks and full mine reach every compiled loop
_BASKETS = (
    ("a", "b", "c"),
    ("a", "b"),
    ("b", "c", "d"),
    ("a", "c", "d"),
    ("a", "b", "c", "d"),
    ("c", "d"),
    ("a", "d"),
    ("b", "d"),
)


def load_compiled_loops() -> None:
    """Use the compiled loops from now on and load them (from numba's disk cache, else compile
    them): tick a tiny window with tracking, then mine it in full with rules."""
    from stream_miner.engine import fpgrowth
    from stream_miner.engine.incremental import kernels
    from stream_miner.engine.miner import WindowMiner
    from stream_miner.engine.params import MiningParams
    from stream_miner.engine.refresh import Refresh
    from stream_miner.engine.rules import RuleFilter
    from stream_miner.engine.window import CountWindow

    kernels.use_compiled()
    fpgrowth.use_compiled_loop()
    miner = WindowMiner(CountWindow(6))
    params = MiningParams(min_count=2, rules=RuleFilter())
    for basket in _BASKETS[:6]:
        miner.add(basket)
    miner.tick(params, refresh=Refresh.TRACKED)
    for basket in _BASKETS[6:]:
        miner.add(basket)
    miner.tick(params, refresh=Refresh.TRACKED)
    miner.mine(params)


def start_loading_compiled_loops() -> threading.Thread:
    """Load the compiled loops on a daemon thread (started, returned). Nothing waits for it: a
    process may exit while it loads (tried at random moments of cold and warm loads: exit code
    0 every time), and a tick that needs a loop meanwhile waits for numba's own lock."""
    thread = threading.Thread(target=_load, name="compiled-loops", daemon=True)
    thread.start()
    return thread


def _load() -> None:
    with contextlib.suppress(Exception):  # a tick that needs a loop loads it and reports any failure
        load_compiled_loops()
