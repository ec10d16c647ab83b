"""The scale-out merge and wire format, without a broker.

- The SON merge (Savasere, Omiecinski and Navathe, VLDB 1995): members mining their own
  share at the proportional threshold, then counting the union exactly, give exactly the
  itemsets and rules of batch mining all baskets together (checked against the independent
  brute-force miner and against :class:`WindowMiner` on the union).
- Messages survive being cut into records; a record missing from a message, or a message
  of a kind nobody knows, is skipped with a one-line warning.
- The board keeps the first close of a tick, forgets parts of closed ticks, and tracks where
  each partition's last owner read to.
"""

from __future__ import annotations

import io
import random
from fractions import Fraction

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from brute_force import frequent_itemsets
from stream_miner.cluster.merge import candidates, global_result, local_params, totals
from stream_miner.cluster.retention import warn_short_retention
from stream_miner.cluster.wire import CLOSE, PART, PART_BYTES, Board, Message, Reassembly
from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.rules import RuleFilter

ITEMS = list("abcdefgh")


def son(shares: list[list[list[str]]], params: MiningParams):
    """The global result the members of ``shares`` reach: phase 1 locally, phase 2 counted."""
    miners = []
    for share in shares:
        miner = WindowMiner()
        for basket in share:
            miner.add(basket)
        miners.append(miner)
    local = [miner.mine(local_params(params)).itemsets for miner in miners]
    asked = candidates(local)
    counts = totals(asked, [miner.count(asked) for miner in miners])
    return global_result(sum(len(share) for share in shares), counts, params)


@settings(max_examples=60, deadline=None)
@given(
    baskets=st.lists(
        st.lists(st.sampled_from(ITEMS), min_size=1, max_size=5, unique=True), min_size=1, max_size=60
    ),
    members=st.integers(1, 4),
    seed=st.integers(0, 10**6),
    percent=st.integers(5, 60),
)
def test_son_merge_equals_batch_mining(baskets, members, seed, percent):
    rng = random.Random(seed)
    shares: list[list[list[str]]] = [[] for _ in range(members)]
    for basket in baskets:
        shares[rng.randrange(members)].append(basket)
    params = MiningParams(min_support=Fraction(percent, 100), rules=RuleFilter())
    merged = son(shares, params)
    threshold = params.threshold(len(baskets))
    expected = {tuple(sorted(k)): v for k, v in frequent_itemsets(baskets, threshold).items()}
    assert merged.itemsets == expected
    assert merged.n_baskets == len(baskets) and merged.min_count == threshold
    batch = WindowMiner()
    for basket in baskets:
        batch.add(basket)
    whole = batch.mine(params)
    assert merged.itemsets == whole.itemsets
    assert set(merged.rules) == set(whole.rules) and len(merged.rules) == len(whole.rules)  # any order


def test_a_member_with_no_baskets_changes_nothing():
    baskets = [["a", "b"], ["a", "b"], ["a", "c"], ["b", "c"]]
    params = MiningParams(min_support=Fraction(1, 2))
    assert (
        son([baskets, []], params).itemsets
        == son([baskets], params).itemsets
        == {
            ("a",): 3,
            ("b",): 3,
            ("c",): 2,
            ("a", "b"): 2,
        }
    )


def test_a_count_threshold_has_no_share_per_member():
    with pytest.raises(ValueError, match="--min-support"):
        local_params(MiningParams(min_count=3))


def records_of(message: Message) -> list[tuple[bytes, list[tuple[str, bytes]]]]:
    return [(value, headers) for _, value, headers in message.records()]


def test_a_large_message_is_cut_into_records_and_put_back_together():
    rng = random.Random(3)
    itemsets = [
        [[f"item-{rng.randrange(10**9)}" for _ in range(4)], rng.randrange(1000)] for _ in range(60000)
    ]
    message = Message(PART, 1_700_000_030.0, "m1", {"itemsets": itemsets, "partitions": {"0": [5, 9]}})
    records = records_of(message)
    assert len(records) > 1 and all(len(value) <= PART_BYTES for value, _ in records)
    reassembly = Reassembly(io.StringIO())
    results = [reassembly.take(value, headers) for value, headers in records]
    assert results[:-1] == [None] * (len(records) - 1)
    assert results[-1] == message


def test_a_message_missing_a_record_is_skipped_with_a_warning():
    rng = random.Random(4)
    body = {"itemsets": [[[str(rng.random())], 1] for _ in range(80000)], "partitions": {}}
    records = records_of(Message(PART, 30.0, "m1", body))
    assert len(records) >= 3
    log = io.StringIO()
    reassembly = Reassembly(log)
    taken = [reassembly.take(value, headers) for value, headers in records[:1] + records[2:]]
    assert taken == [None] * (len(records) - 1)
    assert "skipped a message with a piece missing" in log.getvalue()
    assert reassembly.take(*records_of(Message(CLOSE, 30.0, "m1", {"complete": False}))[0]) is not None


def test_records_that_are_not_messages_are_skipped_with_a_warning():
    log = io.StringIO()
    reassembly = Reassembly(log)
    assert reassembly.take(b"{}", None) is None
    odd = Message("gossip", 1.0, "m", {})
    assert reassembly.take(*records_of(odd)[0]) is None
    lines = log.getvalue().splitlines()
    assert len(lines) == 2 and "without message headers" in lines[0] and "unknown kind 'gossip'" in lines[1]


def test_the_board_keeps_the_first_close_and_forgets_closed_ticks():
    board = Board()
    board.take(Message(PART, 30.0, "m1", {"partitions": {"0": [0, 10]}, "generation": 1}))
    board.take(Message(PART, 60.0, "m1", {"partitions": {"0": [4, 17]}, "generation": 1}))
    board.take(Message(CLOSE, 30.0, "agg", {"complete": True, "mark": "first", "state": {}}))
    board.take(Message(CLOSE, 30.0, "old", {"complete": True, "mark": "second", "state": {}}))
    assert board.closed[30.0]["mark"] == "first" and board.last_closed == 30.0
    assert list(board.parts) == [60.0]
    assert board.read_to == {0: 17}
    board.take(Message(PART, 30.0, "late", {"partitions": {"1": [0, 3]}, "generation": 1}))
    assert 30.0 not in board.parts  # a part of a closed tick is not waited for


def test_a_log_kept_shorter_than_a_rebuild_reads_is_one_warning():
    log = io.StringIO()
    assert warn_short_retention("checkouts", 3 * 86400.0, 7 * 86400.0, log)
    assert log.getvalue().count("\n") == 1 and "raise retention.ms" in log.getvalue()
    assert not warn_short_retention("checkouts", float("inf"), 7 * 86400.0, log)  # kept forever
    assert not warn_short_retention("checkouts", None, 7 * 86400.0, log)  # the broker does not say
    assert not warn_short_retention("checkouts", 7 * 86400.0, 7 * 86400.0, log)
    assert log.getvalue().count("\n") == 1
