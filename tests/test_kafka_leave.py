"""How a stopped member leaves its group (stream_miner/connectors/kafka_join_fix.py): a join
round in flight ends first; then a LeaveGroup only when a heartbeat finds the group steady,
and during a rebalance none (the rebalance drops the member). A LeaveGroup during a rebalance
made the test broker name the gone member the group's leader, and the others waited 50-300 s
for it (seen in the fault campaign's group-churn scenario)."""

from __future__ import annotations

import threading
from collections.abc import Callable

import pytest
from kafka import KafkaConsumer

from kafka_broker import GROUP_OPTIONS
from processes import wait_until
from stream_miner.connectors.kafka_join_fix import keep_finished_joins
from stream_miner.connectors.kafka_source import KafkaSource, client_options
from stream_miner.decoding.messages import MessageFormat

pytestmark = pytest.mark.kafka

SETTLED_WITHIN = 45.0  # seconds: a few join rounds (up to the 5 s rebalance timeout each)
OPTIONS = client_options(GROUP_OPTIONS)


def plain_member(broker, topic: str, group: str) -> KafkaConsumer:
    """A kafka-python member, with the library fix the run's members have (a lost join)."""
    consumer = KafkaConsumer(
        bootstrap_servers=broker.address, group_id=group, enable_auto_commit=False, **OPTIONS
    )
    keep_finished_joins(consumer)
    consumer.subscribe([topic])
    return consumer


def holding(consumer: KafkaConsumer, count: int) -> Callable[[], bool]:
    """A condition that polls ``consumer`` once and holds when it has ``count`` partitions."""
    return lambda: consumer.poll(timeout_ms=100) is not None and len(consumer.assignment()) == count


def recorded(source: KafkaSource) -> list[str]:
    """The names of the group requests ``source``'s consumer sends from now on, in order."""
    return recorded_consumer(source._consumer)


def recorded_consumer(consumer: KafkaConsumer) -> list[str]:
    """The names of the requests ``consumer``'s group coordinator sends from now on, in order."""
    sent: list[str] = []
    manager = consumer._coordinator._manager
    library_send = manager.send

    def recording_send(request, *args, **kwargs):
        sent.append(type(request).__name__)
        return library_send(request, *args, **kwargs)

    manager.send = recording_send
    return sent


def test_a_member_stopped_mid_join_ends_the_round_then_leaves(broker):
    broker.create_topic("mid-join", 2)
    staying = plain_member(broker, "mid-join", "g-mid-join")
    try:
        wait_until(holding(staying, 2), 60, "the first member holds both partitions")
        stopped = KafkaSource(f"kafka://{broker.address}/mid-join", "g-mid-join", MessageFormat(), OPTIONS)
        sent = recorded(stopped)
        # its JoinGroup is held by the broker until the first member joins again
        wait_until(lambda: stopped.poll() == [] and "JoinGroupRequest" in sent, 30, "a JoinGroup sent")
        closing = threading.Thread(target=stopped.close)
        closing.start()
        # the first member joins again, the round ends, then the stopped member leaves and
        # the first one takes both partitions
        settled = lambda: holding(staying, 2)() and not closing.is_alive()  # noqa: E731
        wait_until(settled, SETTLED_WITHIN, lambda: f"the group settled without the stopped member: {sent}")
        assert "LeaveGroupRequest" in sent, sent
        leave = sent.index("LeaveGroupRequest")
        assert "SyncGroupRequest" in sent[:leave], sent  # the round in flight ended first
        assert "SyncGroupRequest" not in sent[leave:], sent
    finally:
        staying.close(autocommit=False)


class Poller(threading.Thread):
    """Polls one member in a loop (as its own process would) until :meth:`halt`."""

    def __init__(self, poll: Callable[[], object]) -> None:
        super().__init__(daemon=True)
        self._poll, self._halted = poll, threading.Event()
        self.start()

    def run(self) -> None:
        while not self._halted.is_set():
            self._poll()

    def halt(self) -> None:
        self._halted.set()
        self.join(timeout=30)


def test_a_member_stopped_during_a_rebalance_sends_no_leave_group_and_is_dropped(broker):
    broker.create_topic("rebalancing", 4)
    first = plain_member(broker, "rebalancing", "g-rebalancing")
    stopped = KafkaSource(f"kafka://{broker.address}/rebalancing", "g-rebalancing", MessageFormat(), OPTIONS)
    pollers = [Poller(lambda: first.poll(timeout_ms=100)), Poller(stopped.poll)]
    third = None
    try:
        two_each = lambda: len(first.assignment()) == 2 and len(stopped._consumer.assignment()) == 2  # noqa: E731
        wait_until(two_each, 60, "two members hold two partitions each")
        pollers.pop().halt()  # the stopped member's loop has ended
        sent = recorded(stopped)
        third = plain_member(broker, "rebalancing", "g-rebalancing")
        joining = recorded_consumer(third)
        pollers.append(Poller(lambda: third.poll(timeout_ms=100)))
        # the third member's JoinGroup starts a rebalance that waits for the stopped member
        wait_until(lambda: "JoinGroupRequest" in joining, 30, "the third member asked to join")
        stopped.close()
        assert "LeaveGroupRequest" not in sent, sent
        shared = lambda: len(first.assignment()) == 2 and len(third.assignment()) == 2  # noqa: E731
        wait_until(shared, SETTLED_WITHIN, "the other two members share the partitions")
    finally:
        for poller in pollers:
            poller.halt()
        first.close(autocommit=False)
        if third is not None:
            third.close(autocommit=False)
