"""The adaptive refresh: the chooser's rule on given costs, and exact results whatever it decides."""

from __future__ import annotations

from hypothesis import given, settings
from hypothesis import strategies as st

from brute_force import frequent_itemsets
from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.refresh import RefreshChooser
from stream_miner.engine.window import CountWindow


def test_the_first_start_waits_for_one_full_tick_of_credit():
    chooser = RefreshChooser()
    assert not chooser.track(False)  # nothing measured yet
    chooser.full_mined(0.06, upkeep=0.0)
    assert chooser.track(False)  # the credit covers the expected start: one full tick
    assert chooser.track(True)


def test_the_tree_upkeep_counts_as_a_cost_of_a_full_tick():
    chooser = RefreshChooser()
    chooser.full_mined(0.05, upkeep=0.0)
    assert chooser.tracked_tick(0.2, started=True)  # a start costing four full ticks
    chooser.full_mined(0.05, upkeep=0.05)
    assert not chooser.track(False)  # 0.2 s of credit needed, 0.1 banked
    chooser.full_mined(0.05, upkeep=0.05)
    assert chooser.track(False)  # without the upkeep, two more full mines would be needed
    assert chooser.tracked_tick(0.06, started=False)  # dearer than a mine, not than mine and upkeep


def test_a_tracker_dearer_than_a_full_tick_is_dropped_and_the_next_start_waits_twice_as_long():
    chooser = RefreshChooser()
    chooser.full_mined(1.0, upkeep=0.0)
    assert chooser.tracked_tick(1.0, started=True)
    assert not chooser.tracked_tick(3.0, started=False)
    assert chooser.patience == 2
    chooser.full_mined(1.0, upkeep=0.0)
    assert not chooser.track(False)  # no saving banked while a tracked tick costs more
    chooser.full_mined(4.0, upkeep=0.0)  # now a tracked tick (3 s) would save 1 s
    assert not chooser.track(False)  # twice the start (2 s) needed
    chooser.full_mined(4.0, upkeep=0.0)
    assert chooser.track(False)


def test_one_slow_tracked_tick_keeps_the_tracker_but_a_lasting_excess_drops_it():
    chooser = RefreshChooser()
    chooser.full_mined(1.0, upkeep=0.0)
    assert chooser.tracked_tick(2.0, started=True)  # a start costing two full ticks
    assert chooser.tracked_tick(0.1, started=False)
    assert chooser.tracked_tick(2.5, started=False)  # 1.5 s beyond a full tick: less than a start
    assert chooser.tracked_tick(0.1, started=False)  # pays 0.9 s of it back
    assert chooser.tracked_tick(1.5, started=False)  # 0.6 + 0.5 s
    assert chooser.patience == 1
    assert not chooser.tracked_tick(2.0, started=False)  # 1.1 + 1.0 s: more than a start
    assert chooser.patience == 2


def test_a_window_turned_over_between_two_ticks_doubles_the_wait_for_the_next_start():
    miner = WindowMiner(CountWindow(10), batch_size=4)
    params = MiningParams(min_count=2)
    for _ in range(5):
        miner.add(["a", "b"])
    miner.tick(params)
    miner._chooser.credit = 1e9  # the next tick starts the tracking
    miner.tick(params)
    assert miner._tracker is not None and miner._chooser.patience == 1
    for _ in range(25):  # more than twice the window changes: a restart is cheaper than the deltas
        miner.add(["a", "c"])
    miner.flush()
    assert miner._tracker is None and miner._chooser.patience == 2


class ScriptedChooser(RefreshChooser):
    """Decides from a script (start, keep or drop at random) rather than from costs."""

    def __init__(self, script: list[bool]) -> None:
        super().__init__()
        self.script = script

    def _next(self) -> bool:
        return self.script.pop(0) if self.script else False

    def track(self, tracking: bool) -> bool:
        return tracking or self._next()

    def tracked_tick(self, seconds: float, started: bool) -> bool:
        super().tracked_tick(seconds, started)
        return self._next()


@settings(max_examples=40, deadline=None)
@given(
    st.lists(st.lists(st.sampled_from("abcdefg"), min_size=1, max_size=6), min_size=5, max_size=60),
    st.lists(st.booleans(), max_size=60),
    st.integers(1, 4),
    st.integers(3, 15),
    st.integers(1, 7),
)
def test_adaptive_ticks_are_exact_whatever_the_chooser_decides(baskets, script, min_count, size, every):
    """Starts, drops and restarts of the tracking (with the tree left behind and rebuilt)
    never change a tick's result: each equals brute force over the window."""
    miner = WindowMiner(CountWindow(size), batch_size=3)
    miner._chooser = ScriptedChooser(script)
    params = MiningParams(min_count=min_count)
    for i, basket in enumerate(baskets, start=1):
        miner.add(basket)
        if i % every == 0:
            expected = frequent_itemsets(baskets[max(0, i - size) : i], min_count)
            assert miner.tick(params).result.itemsets == expected
    miner.check_invariants()
