"""Duplicate suppression against a plain model of what must be remembered."""

from __future__ import annotations

import json

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from stream_miner.runtime.dedup import RecentIds

ids_st = st.sampled_from([f"b{i}" for i in range(12)])


@settings(max_examples=200, deadline=None)
@given(st.lists(ids_st, max_size=80), st.integers(1, 6))
def test_count_horizon_remembers_exactly_the_last_accepted_ids(stream, keep_last):
    ids, remembered = RecentIds(keep_last=keep_last), []
    for basket_id in stream:
        duplicate = basket_id in remembered
        assert ids.check_and_add(basket_id) is duplicate
        if not duplicate:
            remembered = (remembered + [basket_id])[-keep_last:]
        assert len(ids) == len(remembered)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(ids_st, st.integers(0, 40)), max_size=80), st.integers(1, 15))
def test_time_horizon_forgets_ids_older_than_the_horizon(stream, horizon):
    ids, remembered, newest = RecentIds(horizon=horizon), [], None
    for basket_id, ts in stream:
        newest = ts if newest is None else max(newest, ts)
        remembered = [(t, b) for t, b in remembered if t >= newest - horizon]
        duplicate = basket_id in {b for _, b in remembered}
        assert ids.check_and_add(basket_id, ts) is duplicate
        if not duplicate:
            remembered.append((ts, basket_id))


@pytest.mark.parametrize("make", [lambda: RecentIds(keep_last=3), lambda: RecentIds(horizon=10.0)])
def test_state_round_trips_through_json(make):
    ids = make()
    for n, basket_id in enumerate(["a", "b", "c", "d"]):
        ids.check_and_add(basket_id, float(n))
    restored = RecentIds.from_state(json.loads(json.dumps(ids.state())))
    for basket_id in ["a", "b", "c", "d", "e"]:
        assert restored.check_and_add(basket_id, 4.0) is ids.check_and_add(basket_id, 4.0)


def test_bad_configuration_is_refused():
    with pytest.raises(ValueError, match="exactly one"):
        RecentIds()
    with pytest.raises(ValueError, match="keep_last"):
        RecentIds(keep_last=0)
    with pytest.raises(ValueError, match="event time"):
        RecentIds(horizon=5).check_and_add("a")
