"""A member stopped while its JoinGroup is still in flight (a SIGTERM during a rebalance)
lets that round end, then closes without a LeaveGroup, and the group settles without it once
its session times out (stream_miner/connectors/kafka_join_fix.py). A LeaveGroup during a
rebalance made the test broker name the gone member the group's leader, and the others
waited 50-300 s for it (seen in the fault campaign's group-churn scenario)."""

from __future__ import annotations

import threading

import pytest
from kafka import KafkaConsumer

from kafka_broker import GROUP_OPTIONS, start_broker, stop_broker
from processes import wait_until
from stream_miner.connectors.kafka_source import KafkaSource, client_options
from stream_miner.decoding.messages import MessageFormat

pytestmark = pytest.mark.kafka

SETTLED_WITHIN = 45.0  # seconds: the 6 s session timeout and a few join rounds (up to 5 s each)


@pytest.fixture(scope="module")
def broker():
    running = start_broker()
    yield running
    stop_broker(running)


def test_a_member_stopped_mid_join_ends_the_round_sends_no_leave_group_and_the_group_settles(broker):
    broker.create_topic("leave", 2)
    options = client_options(GROUP_OPTIONS)
    staying = KafkaConsumer(
        bootstrap_servers=broker.address, group_id="g-leave", enable_auto_commit=False, **options
    )
    staying.subscribe(["leave"])

    def holds(count: int) -> bool:
        return staying.poll(timeout_ms=100) is not None and len(staying.assignment()) == count

    try:
        wait_until(lambda: holds(2), 60, "the first member holds both partitions")
        stopped = KafkaSource(f"kafka://{broker.address}/leave", "g-leave", MessageFormat(), options)
        sent: list[str] = []  # the stopped member's group requests, in the order sent
        manager = stopped._consumer._coordinator._manager
        library_send = manager.send

        def recording_send(request, *args, **kwargs):
            sent.append(type(request).__name__)
            return library_send(request, *args, **kwargs)

        manager.send = recording_send
        # its JoinGroup is held by the broker until the first member joins again
        wait_until(lambda: stopped.poll() == [] and "JoinGroupRequest" in sent, 30, "a JoinGroup sent")
        closing = threading.Thread(target=stopped.close)
        closing.start()
        # the first member joins again: the round ends with a partition each, the stopped
        # member closes, and once its session times out the group settles without it
        wait_until(lambda: holds(1), SETTLED_WITHIN, "the round in flight ended")
        wait_until(lambda: holds(2), SETTLED_WITHIN, "the group settled without the stopped member")
        closing.join(timeout=30)
        assert not closing.is_alive()
        assert "SyncGroupRequest" in sent, sent  # the round in flight ended before the close
        assert "LeaveGroupRequest" not in sent, sent
    finally:
        staying.close(autocommit=False)
