"""A member that leaves its group while its JoinGroup is still in flight (a SIGTERM during a
rebalance) lets the join round end first and sends its LeaveGroup after it, never a SyncGroup
after it (stream_miner/connectors/kafka_join_fix.py), so the group settles without it. Before
the fix the test broker made the leaving member the group's leader and the others waited
50-300 s for it (seen in the fault campaign's group-churn scenario)."""

from __future__ import annotations

import threading

import pytest
from kafka import KafkaConsumer

from kafka_broker import GROUP_OPTIONS, start_broker, stop_broker
from processes import wait_until
from stream_miner.connectors.kafka_source import KafkaSource, client_options
from stream_miner.decoding.messages import MessageFormat

pytestmark = pytest.mark.kafka

SETTLED_WITHIN = 30.0  # seconds: a few join rounds (each waits up to the 5 s rebalance timeout)


@pytest.fixture(scope="module")
def broker():
    running = start_broker()
    yield running
    stop_broker(running)


def test_a_member_leaving_mid_join_sends_no_sync_group_and_the_group_settles(broker):
    broker.create_topic("leave", 2)
    options = client_options(GROUP_OPTIONS)
    staying = KafkaConsumer(
        bootstrap_servers=broker.address, group_id="g-leave", enable_auto_commit=False, **options
    )
    staying.subscribe(["leave"])
    holds_both = lambda: staying.poll(timeout_ms=100) is not None and len(staying.assignment()) == 2  # noqa: E731
    try:
        wait_until(holds_both, 60, "the first member holds both partitions")
        leaving = KafkaSource(f"kafka://{broker.address}/leave", "g-leave", MessageFormat(), options)
        sent: list[str] = []  # the leaving member's group requests, in the order sent
        manager = leaving._consumer._coordinator._manager
        library_send = manager.send

        def recording_send(request, *args, **kwargs):
            sent.append(type(request).__name__)
            return library_send(request, *args, **kwargs)

        manager.send = recording_send
        # its JoinGroup is held by the broker until the first member joins again
        wait_until(lambda: leaving.poll() == [] and "JoinGroupRequest" in sent, 30, "a JoinGroup sent")
        closing = threading.Thread(target=leaving.close)
        closing.start()
        # the first member joins again: the round ends, then the leaving member leaves
        settled = lambda: holds_both() and "LeaveGroupRequest" in sent  # noqa: E731 (polls first)
        wait_until(settled, SETTLED_WITHIN, "the group settled without the leaving member")
        closing.join(timeout=30)
        assert not closing.is_alive()
        leave = sent.index("LeaveGroupRequest")
        assert "SyncGroupRequest" in sent[:leave], sent  # the round in flight ended first
        assert "SyncGroupRequest" not in sent[leave:], sent
    finally:
        staying.close(autocommit=False)
