"""What the drift detector's baselines rest on, against brute force: exact counts over past
spans of a count or time window (the kept past baskets plus the window), their trimming and
their checkpoint round trip; and the detector across restarts with other settings, idle
ticks, and an events file replaced between runs."""

from __future__ import annotations

import json
import random

from hypothesis import given, settings
from hypothesis import strategies as st

from stream_miner import CountWindow, DriftDetector, DriftSettings, MiningParams, TimeWindow, WindowMiner
from stream_miner.connectors.json_lines import JsonLinesFile
from stream_miner.runtime.checkpoint import load_checkpoint, save_checkpoint
from stream_miner.runtime.event_outbox import EventOutbox
from stream_miner.simulate.planted import Plant, baskets

ITEMS = ["a", "b", "c", "d"]
baskets_st = st.lists(
    st.lists(st.sampled_from(ITEMS), min_size=1, max_size=4, unique=True), min_size=1, max_size=60
)
itemsets_st = st.lists(
    st.lists(st.sampled_from([*ITEMS, "never"]), max_size=3, unique=True), min_size=1, max_size=5
)


def brute(rows, itemsets):
    return [sum(1 for r in rows if set(i) <= set(r)) for i in itemsets]


@settings(deadline=None, max_examples=60)
@given(rows=baskets_st, size=st.integers(1, 12), itemsets=itemsets_st, data=st.data())
def test_count_window_past_spans_are_counted_exactly(rows, size, itemsets, data):
    """Every window a tick saw is counted again later exactly, from its span alone."""
    miner = WindowMiner(CountWindow(size), batch_size=data.draw(st.integers(1, 7)))
    miner.keep_past(0, float("inf"))
    seen = []  # (span, the baskets in that window), at ticks
    for i, row in enumerate(rows, 1):
        miner.add(row)
        if data.draw(st.booleans()):
            n = len(miner)  # flushes, as a tick does
            seen.append(((miner.left_total, miner.left_total + n), rows[i - n : i]))
    for (low, high), inside in seen:
        assert miner.count_past(itemsets, low, high) == brute(inside, itemsets)
    if seen:
        (low, high), inside = seen[-1]
        miner.keep_past(low, float("inf"))  # trimmed to what the last span needs
        assert miner.count_past(itemsets, low, high) == brute(inside, itemsets)
        assert miner.past.count([[]], 0, low) == [0]  # nothing kept below the span


@settings(deadline=None, max_examples=60)
@given(rows=baskets_st, length=st.integers(1, 20), itemsets=itemsets_st, data=st.data())
def test_time_window_past_spans_are_counted_exactly(rows, length, itemsets, data):
    """A time window ending at T holds (T - length, T]; its span counts the same later."""
    miner = WindowMiner(TimeWindow(length), batch_size=data.draw(st.integers(1, 7)))
    miner.keep_past(-1, float("inf"))
    seen = []
    for ts, row in enumerate(rows):
        miner.add(row, ts=float(ts))
        if data.draw(st.booleans()):
            n = len(miner)
            end = miner.newest_time
            inside = [r for t, r in enumerate(rows[: ts + 1]) if end - length < t <= end]
            assert len(inside) == n
            seen.append(((end - length, end), inside))
    for (low, high), inside in seen:
        assert miner.count_past(itemsets, low, high) == brute(inside, itemsets)


def test_past_baskets_survive_a_checkpoint(tmp_path):
    rows = [random.Random(1).sample(ITEMS, random.Random(i).randint(1, 4)) for i in range(300)]
    miner = WindowMiner(CountWindow(50), batch_size=1)  # every basket enters, then leaves
    miner.keep_past(100, float("inf"))
    for row in rows:
        miner.add(row)
    assert len(miner) == 50 and miner.left_total == 250  # applied, as before any tick
    save_checkpoint(tmp_path, miner, {})
    restored, _ = load_checkpoint(tmp_path, window=CountWindow(50))
    probe = [["a"], ["a", "b"], ["c", "d"]]
    assert restored.keeping_past and restored.left_total == 250
    expected = brute(rows[100:], probe)
    assert restored.count_past(probe, 100, 300) == miner.count_past(probe, 100, 300) == expected


def planted_miner_and_detector(settings_: DriftSettings, n: int):
    plants = [Plant(("t-a", "t-b", "t-c"), 0.1, start=3000)]
    miner, detector = WindowMiner(CountWindow(1000)), DriftDetector(settings_)
    params = MiningParams(min_support=0.05)
    for i, row in enumerate(baskets(n, plants, seed=2), 1):
        miner.add(row)
        if i % 100 == 0:
            detector.follow(miner, miner.tick(params))
    return miner, detector, params


def test_a_restart_with_a_smaller_pattern_size_forgets_larger_patterns():
    wide = DriftSettings(min_confidence=0.5, min_lift=1.5, max_size=3)
    miner, detector, params = planted_miner_and_detector(wide, 5000)
    assert any(len(p.items) == 3 for p in detector.patterns())
    narrow = DriftSettings(min_confidence=0.5, min_lift=1.5, max_size=2)
    restored = DriftDetector.restored(json.loads(json.dumps(detector.state())), narrow)
    assert all(len(p.items) == 2 for p in restored.patterns())
    for row in baskets(300, seed=5):
        miner.add(row)
    restored.follow(miner, miner.tick(params))  # no KeyError for the forgotten triple


def test_a_restart_with_the_decayed_baseline_starts_its_history_and_without_drift_keeps_no_past():
    previous = DriftSettings(min_confidence=0.5, min_lift=1.5)
    miner, detector, params = planted_miner_and_detector(previous, 4000)
    assert miner.keeping_past and len(miner.past) > 0
    decayed = DriftSettings(min_confidence=0.5, min_lift=1.5, baseline="decayed")
    restored = DriftDetector.restored(json.loads(json.dumps(detector.state())), decayed)
    assert restored.state()["decayed"] is not None
    for row in baskets(200, seed=6):
        miner.add(row)
    restored.follow(miner, miner.tick(params))
    assert not miner.keeping_past and len(miner.past) == 0  # decayed needs no past baskets


def test_idle_ticks_change_nothing():
    settings_ = DriftSettings(min_confidence=0.5, min_lift=1.5)
    miner, detector, params = planted_miner_and_detector(settings_, 2500)
    before = json.dumps(detector.state())
    for _ in range(20):  # a tick by the clock with no new basket: the same window
        assert detector.follow(miner, miner.tick(params)) == []
    assert json.dumps(detector.state()) == before


def test_a_replaced_events_file_is_not_cut_back(tmp_path, capsys):
    first = tmp_path / "events.jsonl"
    outbox = EventOutbox(JsonLinesFile(first), hold=True)
    outbox.write([{"id": "one"}, {"id": "two"}])
    state = json.loads(json.dumps(outbox.state()))  # the checkpoint, taken before the release
    outbox.release(tmp_path, 1)
    outbox.sink.close()
    other = tmp_path / "other.jsonl"
    other.write_text("".join(json.dumps({"line": i}) + "\n" for i in range(100)))
    restored = EventOutbox(JsonLinesFile(other), hold=True)
    restored.restore(state, tmp_path / "no-note-here", 1)  # no note: the events count as not out
    restored.release(tmp_path, 1)
    lines = other.read_text().splitlines()
    assert len(lines) == 102 and [json.loads(x) for x in lines[-2:]] == [{"id": "one"}, {"id": "two"}]
    assert "not the file the checkpoint measured" in capsys.readouterr().err
