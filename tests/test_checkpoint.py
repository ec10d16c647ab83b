"""Checkpoints: exact round trips, continuing after a restore, atomic writes, and every way
a checkpoint can be unusable (each raises CheckpointError, never a silent reset)."""

from __future__ import annotations

import io
import json
import math
import os
import random
import tempfile
from fractions import Fraction
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from stream_miner.engine.hygiene import BasketPolicy, Oversize, Verdict
from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.rules import RuleFilter
from stream_miner.engine.window import CountWindow, TimeWindow
from stream_miner.runtime import checkpoint
from stream_miner.runtime.checkpoint import (
    CHECKPOINT_NAME,
    FORMAT,
    VERSION,
    CheckpointError,
    load_checkpoint,
    save_checkpoint,
)

FRESH = "--restart-fresh"
POLICY = BasketPolicy(max_items=4, oversize=Oversize.TRUNCATE)
PARAMS = [
    MiningParams(min_count=1),
    MiningParams(min_count=2, max_size=2),
    MiningParams(min_support=Fraction(1, 5), rules=RuleFilter()),
    MiningParams(min_count=1, rules=RuleFilter(min_confidence=Fraction(1, 2)), exclude=frozenset("b")),
]
METADATA = {
    "offsets": {"baskets-0": 1234, "baskets-1": 99},
    "consumed": 5678,
    "dedup": {"recent": ["t-1", "t-2", "ümlaut-☕"], "capacity": 100000},
    "tick": 17,
    "ratio": 0.1,
    "nothing": None,
    "flag": True,
}


def random_stream(seed: int, n: int, alphabet: str = "abcdefghij", with_ts: bool = True):
    rng = random.Random(seed)
    out = []
    for i in range(n):
        basket = [rng.choice(alphabet) for _ in range(rng.randint(0, 7))]
        ts = float(i // 2 + rng.randint(-3, 3)) if with_ts else None
        out.append((basket, ts))
    return out


def feed(miner: WindowMiner, stream) -> None:
    for basket, ts in stream:
        miner.add(basket, ts=ts)


def assert_same_miner(a: WindowMiner, b: WindowMiner) -> None:
    assert a.state().next_tick == b.state().next_tick
    assert a.state().last_result == b.state().last_result
    for params in PARAMS:
        assert a.mine(params) == b.mine(params)
    assert a.vocabulary.names() == b.vocabulary.names()
    assert a.verdicts == b.verdicts
    assert len(a) == len(b)
    assert a._newest_ts == b._newest_ts
    assert np.array_equal(a.tree.rank, b.tree.rank)
    a.check_invariants()
    b.check_invariants()


# ------------------------------------------------------------------ round trips
@pytest.mark.parametrize(
    "window, with_ts",
    [(CountWindow(40), False), (CountWindow(40), True), (TimeWindow(12.5), True), (None, False)],
)
def test_round_trip_restores_window_vocabulary_verdicts_and_metadata(tmp_path, window, with_ts):
    miner = WindowMiner(window, POLICY, batch_size=7)
    feed(miner, random_stream(1, 150, with_ts=with_ts))
    for params in PARAMS:
        miner.tick(params)
    miner.add(["zebra", "yak", "x", "w", "v", "u"], ts=1000.0 if with_ts else None)  # truncated
    assert miner.verdicts[Verdict.SKIPPED_EMPTY] and miner.verdicts[Verdict.TRUNCATED]

    path = save_checkpoint(tmp_path, miner, METADATA)
    assert path == tmp_path / CHECKPOINT_NAME
    restored, metadata = load_checkpoint(tmp_path, window=window, policy=POLICY, batch_size=3)

    assert metadata == METADATA
    assert json.dumps(metadata, sort_keys=True) == json.dumps(METADATA, sort_keys=True)
    assert restored.state().next_tick == len(PARAMS)
    assert restored.state().last_result == miner.state().last_result is not None
    assert miner.state().last_result.rules
    assert restored.batch_size == 3 and restored.window == window and restored.policy == POLICY
    assert_same_miner(miner, restored)
    assert [restored.vocabulary.lookup(n) for n in miner.vocabulary.names()] == list(
        range(len(miner.vocabulary))
    )
    baskets, ts, tags = miner.store.contents()
    baskets2, ts2, tags2 = restored.store.contents()
    assert baskets.to_lists() == baskets2.to_lists()
    assert np.array_equal(ts, ts2, equal_nan=True)
    assert np.array_equal(tags, tags2)


@pytest.mark.parametrize("window", [CountWindow(1000), TimeWindow(20)])
def test_save_keeps_the_buffer_and_changes_nothing_in_the_miner(tmp_path, window):
    stream = random_stream(2, 130)
    miner = WindowMiner(window, batch_size=47)
    twin = WindowMiner(window, batch_size=47)
    feed(miner, stream[:120])
    feed(twin, stream[:120])
    assert miner._pending and len(miner.store)  # some baskets still buffered, some applied
    save_checkpoint(tmp_path, miner, {})
    assert miner._pending == twin._pending and len(miner.store) == len(twin.store)
    restored, _ = load_checkpoint(tmp_path, window=window, batch_size=47)
    assert restored._pending == miner._pending and restored._pending_ts == miner._pending_ts
    for m in (miner, twin, restored):
        feed(m, stream[120:])
    assert_same_miner(twin, miner)
    assert_same_miner(twin, restored)


@pytest.mark.parametrize("only_skipped", [False, True])
def test_empty_window_checkpoint(tmp_path, only_skipped):
    window = TimeWindow(10)
    miner = WindowMiner(window, BasketPolicy(max_items=2))
    if only_skipped:
        miner.add([], ts=5.0)
        miner.add(["a", "b", "c"], ts=7.0)  # oversize: skipped, but "a", "b", "c" got ids
    save_checkpoint(tmp_path, miner, {"tick": 0})
    restored, metadata = load_checkpoint(tmp_path, window=window, policy=BasketPolicy(max_items=2))
    assert metadata == {"tick": 0}
    assert len(restored) == 0
    assert restored.mine(MiningParams(min_count=1)).itemsets == {}
    assert restored.vocabulary.names() == (["a", "b", "c"] if only_skipped else [])
    assert restored.verdicts == miner.verdicts
    assert restored._newest_ts == miner._newest_ts
    for m in (miner, restored):
        m.add(["c", "d"], ts=8.0)
        m.add(["d"], ts=9.0)
    assert_same_miner(miner, restored)


def test_file_is_a_plain_npz_readable_without_pickle(tmp_path):
    miner = WindowMiner(TimeWindow(30))
    feed(miner, random_stream(3, 60))
    save_checkpoint(tmp_path, miner, METADATA)
    with np.load(tmp_path / CHECKPOINT_NAME, allow_pickle=False) as npz:
        arrays = {key: npz[key] for key in npz.files}
    assert set(arrays) == set(checkpoint._KEYS) | set(checkpoint._PAST_KEYS)
    assert all(a.dtype != object for a in arrays.values())
    assert arrays["items"].dtype in (np.int32, np.uint32) and arrays["start"].dtype == np.int64
    assert arrays["ts"].dtype == np.float64 and arrays["ts"].size == arrays["start"].size - 1
    header = json.loads(arrays["header"].tobytes())
    assert header["format"] == FORMAT and header["version"] == VERSION
    assert header["window"] == {"kind": "time", "seconds": 30.0}
    assert header["policy"] == {"max_items": 1000, "oversize": "skip"}
    assert header["metadata"] == METADATA
    assert json.loads(arrays["names"].tobytes()) == miner.vocabulary.names()
    assert arrays["newest_ts"][0] == miner._newest_ts


def test_metadata_must_round_trip_through_json(tmp_path):
    miner = WindowMiner(CountWindow(5))
    miner.add(["a"])
    save_checkpoint(tmp_path, miner, {"tick": 1})
    for bad in ({1: "int key"}, {"t": (1, 2)}, {"x": float("nan")}, {"o": object()}):
        with pytest.raises(ValueError):
            save_checkpoint(tmp_path, miner, bad)
    with pytest.raises(ValueError, match=r"metadata\['dedup'\]\['ids'\]\[0\] is a tuple"):
        save_checkpoint(tmp_path, miner, {"dedup": {"ids": [(1.0, "t1")]}})
    assert load_checkpoint(tmp_path, window=CountWindow(5))[1] == {"tick": 1}
    assert sorted(p.name for p in tmp_path.iterdir()) == [CHECKPOINT_NAME]


# ------------------------------------------------------------------ continuing
stream_st = st.lists(
    st.tuples(st.lists(st.sampled_from("abcdefg"), max_size=6), st.integers(0, 40)),
    min_size=1,
    max_size=60,
)


def canonical(result):
    """A result without the listing order (which depends on the tree's item order, and so
    on batch boundaries): itemsets and rules by item names."""
    return (
        result.n_baskets,
        result.min_count,
        result.itemsets,
        {(r.antecedent, r.consequent): r.count for r in result.rules},
    )


@settings(max_examples=80, deadline=None)
@given(
    stream_st,
    st.data(),
    st.one_of(st.builds(CountWindow, st.integers(1, 15)), st.builds(TimeWindow, st.integers(1, 12))),
    st.integers(1, 8),
    st.one_of(st.none(), st.integers(1, 8)),
    st.integers(1, 3),
)
def test_continuing_after_restore_equals_an_uninterrupted_miner(
    stream, data, window, batch, batch2, min_count
):
    """Same batch size: identical results (listing order included). Another batch size on
    restore: the same itemsets and rules."""
    cut = data.draw(st.integers(0, len(stream)), label="cut")
    policy = BasketPolicy(max_items=4, oversize=Oversize.SKIP)
    params = [MiningParams(min_count=min_count), MiningParams(min_count=1, rules=RuleFilter())]
    whole = WindowMiner(window, policy, batch_size=batch)
    first = WindowMiner(window, policy, batch_size=batch)
    for basket, ts in stream[:cut]:
        whole.add(basket, ts=ts)
        first.add(basket, ts=ts)
    with tempfile.TemporaryDirectory() as directory:
        save_checkpoint(directory, first, {"consumed": cut})
        resumed, metadata = load_checkpoint(
            directory, window=window, policy=policy, batch_size=batch if batch2 is None else batch2
        )
    assert metadata == {"consumed": cut}
    for basket, ts in stream[cut:]:
        verdict = whole.add(basket, ts=ts)
        assert first.add(basket, ts=ts) == resumed.add(basket, ts=ts) == verdict
        for p in params:
            expected = whole.mine(p)
            assert first.mine(p) == expected  # saving changed nothing
            if batch2 is None:
                assert resumed.mine(p) == expected
            else:
                assert canonical(resumed.mine(p)) == canonical(expected)
    assert whole.vocabulary.names() == resumed.vocabulary.names()
    assert whole.verdicts == resumed.verdicts
    resumed.check_invariants()


tick_stream_st = st.lists(
    st.tuples(st.lists(st.sampled_from("abcdefg"), max_size=6), st.integers(0, 40), st.booleans()),
    min_size=1,
    max_size=60,
)
TICK_PARAMS = [
    MiningParams(min_support=Fraction(1, 4), rules=RuleFilter(min_confidence=Fraction(1, 3))),
    MiningParams(min_count=2, max_size=2, rules=RuleFilter()),
    MiningParams(min_count=1, exclude=["a"]),
]


def run_ticks(miner: WindowMiner, stream, params, last: bool) -> list:
    """Feed ``stream``, ticking where it says (and once more at the end when ``last``):
    each tick's number, result (rules by their sides) and delta."""

    def tick() -> tuple:
        made = miner.tick(params)
        result = made.result
        rules = {(r.antecedent, r.consequent): r for r in result.rules}
        return made.number, result.n_baskets, result.min_count, result.itemsets, rules, made.delta

    out = []
    for basket, ts, tick_now in stream:
        miner.add(basket, ts=ts)
        if tick_now:
            out.append(tick())
    return out + [tick()] if last else out


@settings(max_examples=80, deadline=None)
@given(
    tick_stream_st,
    st.data(),
    st.one_of(st.builds(CountWindow, st.integers(1, 15)), st.builds(TimeWindow, st.integers(1, 12))),
    st.integers(1, 8),
    st.sampled_from(TICK_PARAMS),
)
def test_ticks_carry_on_across_a_checkpoint(stream, data, window, batch, params):
    """Ticks interrupted by a save and a load at any point: the same tick numbers, results
    and deltas as without (the first delta after the load is against the last tick before)."""
    cut = data.draw(st.integers(0, len(stream)), label="cut")
    expected = run_ticks(WindowMiner(window, batch_size=batch), stream, params, last=True)
    first = WindowMiner(window, batch_size=batch)
    got = run_ticks(first, stream[:cut], params, last=False)
    with tempfile.TemporaryDirectory() as directory:
        save_checkpoint(directory, first, {})
        resumed, _ = load_checkpoint(directory, window=window, batch_size=batch)
    got += run_ticks(resumed, stream[cut:], params, last=True)
    assert got == expected


def test_watermark_advanced_before_the_save_is_kept(tmp_path):
    window = TimeWindow(10)
    miner = WindowMiner(window, batch_size=100)
    feed(miner, [(["a", "b"], 1.0), (["b"], 5.0), (["c"], 8.0)])
    miner.advance_time(16.0)  # expires the first two baskets at the next flush
    save_checkpoint(tmp_path, miner, {})
    restored, _ = load_checkpoint(tmp_path, window=window)
    assert len(restored) == len(miner) == 1
    for m in (miner, restored):
        m.add(["b", "c"], ts=12.0)
    assert_same_miner(miner, restored)


def test_continuing_across_tree_reorders_keeps_results_identical(tmp_path):
    """The item order (and its re-order schedule) is restored, so even the order of rules
    and itemsets matches an uninterrupted miner after the popularity of items drifts."""
    rng = random.Random(7)
    alphabet = "abcdefghijkl"

    def basket(i):
        popular = alphabet[:6] if i < 2500 else alphabet[6:]
        return [rng.choice(popular) for _ in range(rng.randint(1, 5))] + [rng.choice(alphabet)]

    stream = [basket(i) for i in range(6000)]
    window = CountWindow(1200)
    whole = WindowMiner(window, batch_size=256)
    first = WindowMiner(window, batch_size=256)
    feed(whole, [(b, None) for b in stream[:2700]])
    feed(first, [(b, None) for b in stream[:2700]])
    save_checkpoint(tmp_path, first, {})
    resumed, _ = load_checkpoint(tmp_path, window=window, batch_size=256)
    rank_at_cut = whole.tree.rank
    params = MiningParams(min_support=Fraction(1, 50), rules=RuleFilter(min_confidence=Fraction(1, 10)))
    for start in range(2700, 6000, 300):
        feed(whole, [(b, None) for b in stream[start : start + 300]])
        feed(resumed, [(b, None) for b in stream[start : start + 300]])
        a, b = whole.mine(params), resumed.mine(params)
        assert a == b
        assert list(a.itemsets) == list(b.itemsets)
        assert np.array_equal(whole.tree.rank, resumed.tree.rank)
    assert not np.array_equal(whole.tree.rank, rank_at_cut), "the stream should have forced a re-order"


# ------------------------------------------------------------------ atomicity
def _saved(tmp_path, seed, metadata):
    """A checkpoint of a miner after two ticks (the last with rules), with a buffer."""
    miner = WindowMiner(CountWindow(30), batch_size=16)
    stream = random_stream(seed, 80, with_ts=False)
    feed(miner, stream[:40])
    miner.tick(PARAMS[0])
    feed(miner, stream[40:60])
    assert miner.tick(PARAMS[3]).result.rules
    feed(miner, stream[60:])
    assert len(miner.store) and miner._pending
    save_checkpoint(tmp_path, miner, metadata)
    return miner


def test_crash_before_rename_keeps_the_previous_checkpoint(tmp_path, monkeypatch):
    old = _saved(tmp_path, 4, {"tick": 1})
    newer = WindowMiner(CountWindow(30))
    feed(newer, random_stream(5, 80, with_ts=False))
    written = []

    def crash(src, dst):
        written.append(Path(src).stat().st_size)
        raise OSError("simulated crash")

    monkeypatch.setattr(os, "replace", crash)
    with pytest.raises(OSError, match="simulated crash"):
        save_checkpoint(tmp_path, newer, {"tick": 2})
    monkeypatch.undo()
    assert written and written[0] > 0  # the temporary file was fully written first
    restored, metadata = load_checkpoint(tmp_path, window=CountWindow(30))
    assert metadata == {"tick": 1}
    assert_same_miner(old, restored)
    assert sorted(p.name for p in tmp_path.iterdir()) == [CHECKPOINT_NAME]


def test_leftover_temporary_file_is_never_taken_for_a_checkpoint(tmp_path, monkeypatch):
    newer = WindowMiner(CountWindow(30))
    feed(newer, random_stream(5, 80, with_ts=False))
    # a hard crash: the rename never happens and nothing cleans up
    monkeypatch.setattr(os, "replace", lambda src, dst: (_ for _ in ()).throw(OSError("killed")))
    monkeypatch.setattr(os, "unlink", lambda path: None)
    with pytest.raises(OSError):
        save_checkpoint(tmp_path, newer, {"tick": 2})
    monkeypatch.undo()
    leftovers = [p for p in tmp_path.iterdir() if p.name != CHECKPOINT_NAME]
    assert leftovers and not (tmp_path / CHECKPOINT_NAME).exists()
    assert load_checkpoint(tmp_path, window=CountWindow(30)) is None

    old = _saved(tmp_path, 4, {"tick": 1})  # the next save removes stale temporaries
    assert sorted(p.name for p in tmp_path.iterdir()) == [CHECKPOINT_NAME]
    restored, metadata = load_checkpoint(tmp_path, window=CountWindow(30))
    assert metadata == {"tick": 1}
    assert_same_miner(old, restored)


def test_save_fsyncs_the_file_before_the_rename_and_the_directory_after(tmp_path, monkeypatch):
    events = []
    real_fsync, real_replace = os.fsync, os.replace

    def fsync(fd):
        events.append(
            ("fsync", os.path.isdir(f"/proc/self/fd/{fd}") if os.path.exists("/proc/self/fd") else None)
        )
        real_fsync(fd)

    def replace(src, dst):
        events.append(("replace", None))
        real_replace(src, dst)

    monkeypatch.setattr(os, "fsync", fsync)
    monkeypatch.setattr(os, "replace", replace)
    _saved(tmp_path, 6, {})
    assert [e[0] for e in events] == ["fsync", "replace", "fsync"]
    if events[0][1] is not None:
        assert events[0][1] is False and events[2][1] is True


def test_missing_directory_or_file_means_no_checkpoint(tmp_path):
    assert load_checkpoint(tmp_path / "never-created", window=CountWindow(3)) is None
    assert load_checkpoint(tmp_path, window=CountWindow(3)) is None


# ------------------------------------------------------------------ errors
def _rewrite(path: Path, change) -> None:
    with np.load(path, allow_pickle=False) as npz:
        arrays = {key: npz[key] for key in npz.files}
    change(arrays)
    with open(path, "wb") as handle:
        np.savez(handle, **arrays)


def _set_header(**fields):
    def change(arrays):
        header = json.loads(arrays["header"].tobytes())
        header.update(fields)
        arrays["header"] = np.frombuffer(json.dumps(header).encode(), dtype=np.uint8)

    return change


def _savez_exactly(path: Path, **arrays) -> None:
    with open(path, "wb") as handle:  # a file object: np.savez appends no ".npz"
        np.savez(handle, **arrays)


def _npy_bytes(array: np.ndarray) -> bytes:
    buffer = io.BytesIO()
    np.save(buffer, array)
    return buffer.getvalue()


def _truncate(path: Path) -> None:
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])


def _flip_byte(path: Path) -> None:
    """Flip a byte inside the window's item array (a zip header's date field, say, would be
    harmless), so that only the zip's checksum can tell."""
    data = bytearray(path.read_bytes())
    name = data.find(b"items.npy")  # the local header's file name; the .npy header follows
    data[name + len(b"items.npy") + 128 + 4] ^= 0xFF
    path.write_bytes(bytes(data))


CORRUPTIONS = {
    "text file": (lambda p: p.write_text("offsets: 12\n"), "corrupted"),
    "empty file": (lambda p: p.write_bytes(b""), "corrupted"),
    "truncated": (_truncate, "corrupted"),
    "flipped byte": (_flip_byte, "corrupted"),
    "pickle": (lambda p: p.write_bytes(b"\x80\x04K\x01."), "corrupted"),
    "npy array": (lambda p: p.write_bytes(_npy_bytes(np.arange(3))), "foreign"),
    "other npz": (lambda p: _savez_exactly(p, weights=np.ones(3)), "foreign"),
    "missing items": (lambda p: _rewrite(p, lambda a: a.pop("items")), "missing items"),
    "missing names": (lambda p: _rewrite(p, lambda a: a.pop("names")), "missing names"),
    "missing metadata": (lambda p: _rewrite(p, _drop_header_field("metadata")), "missing metadata"),
    "format": (lambda p: _rewrite(p, _set_header(format="kafka-offsets")), "foreign"),
    "newer version": (lambda p: _rewrite(p, _set_header(version=VERSION + 1)), "newer"),
    "bad version": (lambda p: _rewrite(p, _set_header(version="1")), "corrupted"),
    "object array": (
        lambda p: _rewrite(p, lambda a: a.__setitem__("names", np.array(["a", None], dtype=object))),
        "corrupted",
    ),
    "header not json": (
        lambda p: _rewrite(p, lambda a: a.__setitem__("header", np.frombuffer(b"{nope", dtype=np.uint8))),
        "corrupted",
    ),
    "item outside vocabulary": (
        lambda p: _rewrite(p, lambda a: a.__setitem__("items", a["items"] + 1000)),
        "corrupted",
    ),
    "offsets": (
        lambda p: _rewrite(p, lambda a: a.__setitem__("start", a["start"][::-1].copy())),
        "corrupted",
    ),
    "buffered item outside vocabulary": (
        lambda p: _rewrite(p, lambda a: a.__setitem__("pending_items", a["pending_items"] + 1000)),
        "corrupted",
    ),
    "buffer times": (
        lambda p: _rewrite(p, lambda a: a.__setitem__("pending_ts", a["pending_ts"][1:])),
        "corrupted",
    ),
    "repeated item": (
        lambda p: _rewrite(p, lambda a: a.__setitem__("items", np.zeros_like(a["items"]))),
        "repeats an item",
    ),
    "too many baskets": (
        lambda p: _rewrite(
            p,
            lambda a: (
                a.__setitem__("items", np.zeros(40, np.int32)),
                a.__setitem__("start", np.arange(41, dtype=np.int64)),
                a.__setitem__("ts", np.full(40, np.nan)),
                a.__setitem__("tags", np.full(40, -1, np.int64)),
            ),
        ),
        "40 baskets in a window of 30",
    ),
    "verdicts": (lambda p: _rewrite(p, _set_header(verdicts={"exploded": 3})), "corrupted"),
    "missing ticks": (lambda p: _rewrite(p, _drop_header_field("ticks")), "missing ticks"),
    "missing last rules": (lambda p: _rewrite(p, lambda a: a.pop("last_rules")), "missing last_rules"),
    "negative tick": (lambda p: _rewrite(p, _set_header(ticks={"next": -1, "last": None})), "bad tick state"),
    "ticks without a result": (
        lambda p: _rewrite(p, _set_header(ticks={"next": 2, "last": None})),
        "bad tick state",
    ),
    "last result header": (
        lambda p: _rewrite(p, _set_header(ticks={"next": 2, "last": {"n_baskets": 30}})),
        "bad last result header",
    ),
    "last count": (
        lambda p: _rewrite(p, lambda a: a.__setitem__("last_counts", a["last_counts"] + 100)),
        "outside [min_count, n_baskets]",
    ),
    "last counts missing": (
        lambda p: _rewrite(p, lambda a: a.__setitem__("last_counts", a["last_counts"][1:])),
        "last_counts does not match",
    ),
    "last item outside vocabulary": (
        lambda p: _rewrite(p, lambda a: a.__setitem__("last_items", a["last_items"] + 1000)),
        "outside the vocabulary",
    ),
    "itemset out of name order": (lambda p: _rewrite(p, _swap_first_pair), "not in name order"),
    "repeated itemset": (lambda p: _rewrite(p, _repeat_first_itemset), "repeats an itemset"),
    "rule to nowhere": (
        lambda p: _rewrite(p, lambda a: a.__setitem__("last_rules", a["last_rules"] + 10**6)),
        "refers to no itemset",
    ),
    "rule of one side": (
        lambda p: _rewrite(p, lambda a: a.__setitem__("last_rules", a["last_rules"][:, [0, 0]].copy())),
        "does not split",
    ),
    "rules shape": (
        lambda p: _rewrite(p, lambda a: a.__setitem__("last_rules", a["last_rules"].ravel())),
        "last_rules has dtype",
    ),
}


def _swap_first_pair(arrays) -> None:
    """Swap the two items of the last result's first itemset of two or more items."""
    start = arrays["last_start"]
    row = int(np.flatnonzero(np.diff(start) >= 2)[0])
    items = arrays["last_items"].copy()
    items[start[row]], items[start[row] + 1] = items[start[row] + 1], items[start[row]]
    arrays["last_items"] = items


def _repeat_first_itemset(arrays) -> None:
    """Make the last result's second itemset a copy of its first (both of one item)."""
    items = arrays["last_items"].copy()
    assert arrays["last_start"][1] == 1 and arrays["last_start"][2] == 2
    items[1] = items[0]
    arrays["last_items"] = items


def _drop_header_field(name):
    def change(arrays):
        header = json.loads(arrays["header"].tobytes())
        del header[name]
        arrays["header"] = np.frombuffer(json.dumps(header).encode(), dtype=np.uint8)

    return change


@pytest.mark.parametrize("case", sorted(CORRUPTIONS))
def test_unusable_checkpoint_raises_a_clear_error(tmp_path, case):
    damage, expected = CORRUPTIONS[case]
    _saved(tmp_path, 8, {"tick": 3})
    damage(tmp_path / CHECKPOINT_NAME)
    with pytest.raises(CheckpointError) as info:
        load_checkpoint(tmp_path, window=CountWindow(30), fresh_option=FRESH)
    message = str(info.value)
    assert "\n" not in message
    assert expected in message
    assert FRESH in message and str(tmp_path / CHECKPOINT_NAME) in message


@pytest.mark.parametrize(
    "window, policy, expected",
    [
        (CountWindow(5000), BasketPolicy(), "size=3000"),
        (TimeWindow(3000), BasketPolicy(), "kind=time"),
        (None, BasketPolicy(), "kind=unbounded"),
        (CountWindow(3000), BasketPolicy(max_items=10), "max_items=10"),
        (CountWindow(3000), BasketPolicy(oversize=Oversize.TRUNCATE), "oversize=truncate"),
    ],
)
def test_different_window_or_policy_is_refused(tmp_path, window, policy, expected):
    miner = WindowMiner(CountWindow(3000))
    feed(miner, random_stream(9, 50, with_ts=False))
    save_checkpoint(tmp_path, miner, {})
    with pytest.raises(CheckpointError) as info:
        load_checkpoint(tmp_path, window=window, policy=policy, fresh_option=FRESH)
    message = str(info.value)
    assert "\n" not in message and "incompatible" in message and FRESH in message
    assert "size=3000" in message and expected in message
    # the same settings still load: the refusal changed nothing on disk
    assert load_checkpoint(tmp_path, window=CountWindow(3000)) is not None


def test_time_window_duration_mismatch_is_refused(tmp_path):
    miner = WindowMiner(TimeWindow(60))
    feed(miner, random_stream(10, 30))
    save_checkpoint(tmp_path, miner, {})
    with pytest.raises(CheckpointError, match=r"seconds=60\.0"):
        load_checkpoint(tmp_path, window=TimeWindow(90))
    assert load_checkpoint(tmp_path, window=TimeWindow(60.0)) is not None


def test_default_fresh_option_is_named(tmp_path):
    assert checkpoint.DEFAULT_FRESH_OPTION == "--start-fresh"  # the `run` option
    (tmp_path / CHECKPOINT_NAME).write_text("garbage")
    with pytest.raises(CheckpointError, match=checkpoint.DEFAULT_FRESH_OPTION):
        load_checkpoint(tmp_path, window=CountWindow(3))


def test_a_version_1_checkpoint_is_refused_as_made_by_an_older_release(tmp_path):
    _saved(tmp_path, 11, {"tick": 2})
    _rewrite(tmp_path / CHECKPOINT_NAME, _set_header(version=1))
    with pytest.raises(CheckpointError) as info:
        load_checkpoint(tmp_path, window=CountWindow(30), fresh_option=FRESH)
    message = str(info.value)
    assert "\n" not in message and "older stream-miner" in message and "version 1" in message
    assert FRESH in message and str(tmp_path / CHECKPOINT_NAME) in message


def test_newest_event_time_survives_even_when_infinite(tmp_path):
    miner = WindowMiner(CountWindow(3))
    miner.add(["a"])
    assert miner._newest_ts == -math.inf
    save_checkpoint(tmp_path, miner, {})
    restored, _ = load_checkpoint(tmp_path, window=CountWindow(3))
    assert restored._newest_ts == -math.inf
