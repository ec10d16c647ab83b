"""TickSchedule: ticks at multiples of N accepted baskets from the stream's start."""

from __future__ import annotations

from hypothesis import given, settings
from hypothesis import strategies as st

from stream_miner.runtime.schedule import TickSchedule


def ticks_at(steps: list[int], every: int, extra: set[int] = frozenset()) -> list[int]:
    """Counts at which ticks happen when the count grows by ``steps`` (several baskets may
    enter at once), with unscheduled ticks (a stop, say) at the counts in ``extra``."""
    schedule, consumed, seen = TickSchedule(every=every), 0, []
    for step in steps:
        consumed += step
        if schedule.count_due(consumed) or consumed in extra:
            schedule.ticked(consumed)
            seen.append(consumed)
    return seen


@settings(max_examples=200, deadline=None)
@given(st.lists(st.integers(1, 4), max_size=60), st.integers(1, 7), st.sets(st.integers(1, 150), max_size=5))
def test_scheduled_ticks_follow_each_multiple_of_n_whatever_else_ticked(steps, every, extra):
    seen = ticks_at(steps, every, extra)
    totals = [sum(steps[: i + 1]) for i in range(len(steps))]
    expected = (
        sorted({next(t for t in totals if t >= k * every) for k in range(1, totals[-1] // every + 1)})
        if totals
        else []
    )
    assert [t for t in seen if t not in extra or t in expected] == expected


def test_a_restart_carries_on_at_the_next_multiple():
    schedule = TickSchedule(every=100)
    schedule.restored(ticks=8, consumed=831)  # the last tick came at a stop, after 831 baskets
    assert not schedule.count_due(899) and schedule.count_due(900)
    assert schedule.final_due(832) and not schedule.final_due(831)
