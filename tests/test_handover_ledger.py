"""The handover bookkeeping: the partition ledger, the dead-letter outbox and forgetting ids.

The group's committed offset decides who counts what; these tests pin the rules of
``stream_miner.runtime.ledger`` case by case and against a plain model (a set of counted
offsets per partition) under random operation sequences.
"""

from __future__ import annotations

import json

from hypothesis import given, settings
from hypothesis import strategies as st

from stream_miner.connectors.dead_letters import DeadLetterFile
from stream_miner.decoding.records import DeadLetter
from stream_miner.runtime.dedup import RecentIds
from stream_miner.runtime.ledger import CommitOutcome, PartitionLedger
from stream_miner.runtime.outbox import DeadLetterOutbox


def read(ledger: PartitionLedger, partition: int, offsets) -> None:
    for offset in offsets:
        ledger.took(partition, offset)
        ledger.counted(partition, offset)


def test_an_acknowledged_commit_keeps_everything_below_it():
    ledger = PartitionLedger()
    read(ledger, 0, range(10))
    ledger.sent({0: 10})
    ledger.outcome({0: 10}, CommitOutcome.ACKED)
    assert ledger.boundary(0, committed=10) == 10
    assert ledger.boundary(0, committed=250) == 10  # later owners read on


def test_a_refused_commit_gives_back_everything_since_the_last_acknowledged_one():
    ledger = PartitionLedger()
    read(ledger, 0, range(5))
    ledger.sent({0: 5})
    ledger.outcome({0: 5}, CommitOutcome.ACKED)
    read(ledger, 0, range(5, 12))
    ledger.sent({0: 12})
    ledger.outcome({0: 12}, CommitOutcome.REFUSED)
    # even when the next owner has committed far beyond, it started at 5
    assert ledger.boundary(0, committed=40) == 5
    assert ledger.give_back(0, 5) == 7
    assert ledger.held[0] == 5 and ledger.landed[0] == 5


def test_an_unknown_outcome_is_settled_by_the_groups_offset():
    ledger = PartitionLedger()
    read(ledger, 3, range(100, 110))
    ledger.sent({3: 110})
    ledger.outcome({3: 110}, CommitOutcome.UNKNOWN)
    landed, lost = PartitionLedger.from_state(ledger.state()), PartitionLedger.from_state(ledger.state())
    # the group shows the commit: nothing to give back; it does not: all of it
    assert landed.boundary(3, committed=110) == 110
    assert lost.boundary(3, committed=None) == 0
    assert lost.give_back(3, 0) == 10


def test_nothing_below_the_last_acknowledged_commit_is_ever_given_back():
    ledger = PartitionLedger()
    read(ledger, 1, range(20))
    ledger.sent({1: 20})
    ledger.outcome({1: 20}, CommitOutcome.ACKED)
    # the group's offset moved back to 8 outside stream-miner: still this member's
    assert ledger.boundary(1, committed=8) == 20
    assert ledger.give_back(1, 20) == 0


def test_baskets_counted_late_go_to_the_segment_of_their_offset():
    ledger = PartitionLedger()
    for offset in range(10):
        ledger.took(0, offset)
    read(ledger, 0, [0, 1, 2, 3])  # 4..9 wait in an event-time buffer
    ledger.sent({0: 10})
    ledger.outcome({0: 10}, CommitOutcome.REFUSED)
    read(ledger, 0, [10, 11, 6, 7])  # released later, below the commit sent at 10
    assert ledger.give_back(0, 10) == 2
    assert ledger.give_back(0, 0) == 6


def test_baskets_read_after_a_handover_that_kept_the_partition_can_still_be_given_back():
    """Regression (found by the model test below): an unknown commit taken as landed at a
    handover closed the segment at its offset, so the next basket joined the segment below
    it, and a later handover at that offset gave back nothing: counted twice."""
    ledger = PartitionLedger()
    read(ledger, 2, [0])
    ledger.sent({2: 1})
    ledger.outcome({2: 1}, CommitOutcome.ACKED)
    read(ledger, 2, [1])
    ledger.sent({2: 2})
    ledger.outcome({2: 2}, CommitOutcome.UNKNOWN)
    assert ledger.boundary(2, committed=2) == 2
    assert ledger.give_back(2, 2) == 0
    read(ledger, 2, [2])
    assert ledger.boundary(2, committed=2) == 2
    assert ledger.give_back(2, 2) == 1


operations = st.lists(
    st.one_of(
        st.tuples(st.just("read"), st.integers(0, 2), st.integers(1, 6)),
        st.tuples(st.just("commit"), st.sampled_from(list(CommitOutcome)), st.just(0)),
        st.tuples(st.just("handover"), st.integers(0, 2), st.integers(0, 60)),
    ),
    max_size=40,
)


@settings(max_examples=200, deadline=None)
@given(operations)
def test_ledger_gives_back_exactly_what_a_plain_model_says(ops):
    """Model: per partition the set of counted offsets and the last acknowledged commit; a
    handover to an owner that starts at the group's offset (the last acknowledged commit, or
    a later one by that owner) must give back exactly the counted offsets at or beyond it."""
    ledger = PartitionLedger()
    counted: dict[int, set[int]] = {0: set(), 1: set(), 2: set()}
    landed: dict[int, int] = {}
    nxt = {0: 0, 1: 0, 2: 0}
    for op, a, b in ops:
        if op == "read":
            read(ledger, a, range(nxt[a], nxt[a] + b))
            counted[a] |= set(range(nxt[a], nxt[a] + b))
            nxt[a] += b
        elif op == "commit":
            positions = dict(ledger.held)
            ledger.sent(positions)
            ledger.outcome(positions, a)
            if a is CommitOutcome.ACKED:
                landed.update(positions)
            ledger = PartitionLedger.from_state(json.loads(json.dumps(ledger.state())))
        else:
            start = landed.get(a)  # where the next owner starts
            boundary = ledger.boundary(a, start if start is None else start + b)
            expected_boundary = 0 if start is None else start
            if a in ledger.unsure and start is not None and start + b >= ledger.unsure[a]:
                expected_boundary = ledger.unsure[a]  # an unknown outcome taken as landed
                landed[a] = expected_boundary
            assert boundary == expected_boundary
            given_back = ledger.give_back(a, boundary)
            assert given_back == sum(1 for o in counted[a] if o >= boundary)
            counted[a] = {o for o in counted[a] if o < boundary}
            nxt[a] = min(nxt[a], boundary) if given_back else nxt[a]
            nxt[a] = max(nxt[a], boundary)


def letter(partition: int, offset: int, reason: str = "invalid JSON") -> DeadLetter:
    return DeadLetter(b"{", reason, "why", "kafka:t", partition, offset)


def test_outbox_holds_letters_until_a_commit_covers_them(tmp_path):
    sink = DeadLetterFile(tmp_path / "dead.jsonl")
    outbox = DeadLetterOutbox(sink, hold=True)
    for p, o in [(0, 1), (1, 4), (0, 7), (1, 9)]:
        outbox.write(letter(p, o))
    assert outbox.counts == {"invalid JSON": 4} and sink.position() == 0
    assert outbox.release({0: 5, 1: 5}) == 2
    outbox.give_back(1, 5)  # the next owner of partition 1 writes offset 9
    assert outbox.counts == {"invalid JSON": 3}
    assert outbox.given_back == {"invalid JSON": 1}  # counts + given back never shrink (metrics)
    saved = json.loads(json.dumps(outbox.state()))
    assert outbox.release({0: 8}) == 1
    keys = [json.loads(line)["key"] for line in (tmp_path / "dead.jsonl").read_text().splitlines()]
    assert keys == ["kafka:t/0/1", "kafka:t/1/4", "kafka:t/0/7"]
    # a restart from the saved state cuts the file back and holds offset 7 again
    again = DeadLetterOutbox(DeadLetterFile(tmp_path / "dead.jsonl"), hold=True)
    again.restore(saved)
    assert again.release({0: 8}) == 1
    keys = [json.loads(line)["key"] for line in (tmp_path / "dead.jsonl").read_text().splitlines()]
    assert keys == ["kafka:t/0/1", "kafka:t/1/4", "kafka:t/0/7"]
    assert again.counts == {"invalid JSON": 3} and again.given_back == {"invalid JSON": 1}


def test_forgotten_ids_are_no_duplicates_any_more():
    ids = RecentIds(keep_last=10)
    for n, basket_id in enumerate("abcd"):
        ids.check_and_add(basket_id, tag=n)
    assert ids.forget(2, 4) == 2
    assert [ids.check_and_add(x) for x in "abcd"] == [True, True, False, False]
    timed = RecentIds(horizon=100)
    timed.check_and_add("x", 5.0, tag=7)
    restored = RecentIds.from_state(json.loads(json.dumps(timed.state())))
    assert restored.forget(7, 8) == 1 and not restored.check_and_add("x", 6.0)
