"""Loading the compiled loops ahead of need (stream_miner/engine/compiled_start.py): a fresh
process that loads them uses them for every later mine, tick and rule split from the start, with
the same results."""

from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path

CHECK = textwrap.dedent(
    """
    import sys
    from brute_force import frequent_itemsets
    from stream_miner.engine import fpgrowth
    from stream_miner.engine.incremental import kernels
    from stream_miner.engine.miner import WindowMiner
    from stream_miner.engine.params import MiningParams
    from stream_miner.engine.refresh import Refresh
    from stream_miner.engine.window import CountWindow

    assert "numba" not in sys.modules  # nothing compiled is loaded by importing the engine
    if sys.argv[1] == "load":
        from stream_miner.engine.compiled_start import start_loading_compiled_loops

        start_loading_compiled_loops().join()
    baskets = [[str((i * 7 + k * 3) % 11) for k in range(1 + i % 5)] for i in range(300)]
    miner = WindowMiner(CountWindow(200))
    params = MiningParams(min_count=12)
    for i, basket in enumerate(baskets):
        miner.add(basket)
        if i % 50 == 49:
            tick = miner.tick(params, refresh=Refresh.TRACKED)
            window = baskets[max(0, i + 1 - 200) : i + 1]
            assert tick.result.itemsets == frequent_itemsets(window, 12)
    assert miner.mine(params).itemsets == frequent_itemsets(baskets[-200:], 12)
    print(fpgrowth._Growth.loaded, sorted(loop.__name__ for loop in kernels._compiled))
    """
)


def run_check(mode: str) -> str:
    command = [sys.executable, "-c", CHECK, mode]
    done = subprocess.run(command, capture_output=True, text=True, cwd=Path(__file__).parent, timeout=600)
    assert done.returncode == 0, done.stderr
    return done.stdout.strip()


def test_a_process_that_loads_the_loops_uses_them_from_its_first_mine():
    assert run_check("load") == "True ['add_pairs', 'rows_holding']"


def test_a_process_that_does_not_starts_in_numpy_with_the_same_results():
    assert run_check("lazy") == "False []"
