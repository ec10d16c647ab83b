"""Which member aggregates: the one Kafka gives the coordination topic's only partition to.

Every member joins a second consumer group (``GROUP.aggregator``) on the coordination
topic. With one partition, the group's assignment names exactly one member; when it dies or
leaves, the group's rebalance hands the partition, and with it the aggregator's job, to
another. The partition stays paused: the election consumer never reads (each member reads
the topic through its own unassigned reader), it only polls to stay in the group.
"""

from __future__ import annotations

import sys
from typing import TextIO

from kafka import ConsumerRebalanceListener, KafkaConsumer
from kafka.errors import KafkaError

from stream_miner.connectors.kafka_join_fix import depart, keep_finished_joins
from stream_miner.connectors.kafka_source import connect, describe
from stream_miner.runtime.stop_clock import StopClock


class Election(ConsumerRebalanceListener):
    """This member's place in the aggregator group; :attr:`elected` says whether it holds
    the partition now (changed only by :meth:`keep_up`, on the caller's thread)."""

    def __init__(
        self,
        servers: str,
        topic: str,
        group: str,
        options: dict[str, object],
        *,
        stop: StopClock,
        log: TextIO = sys.stderr,
    ) -> None:
        self._log = log
        self.elected = False
        settings = options | {"group_id": group, "enable_auto_commit": False}
        self._consumer = connect(
            servers, lambda: KafkaConsumer(bootstrap_servers=servers, **settings), stop, log
        )
        keep_finished_joins(self._consumer)
        self._consumer.subscribe([topic], listener=self)

    def on_partitions_revoked(self, revoked: set) -> None:
        if revoked and self.elected:
            print("stream-miner: no longer the aggregator", file=self._log, flush=True)
        self.elected = False

    def on_partitions_assigned(self, assigned: set) -> None:
        self._consumer.pause(*assigned)
        if assigned:
            self.elected = True
            print("stream-miner: elected aggregator", file=self._log, flush=True)

    def keep_up(self) -> None:
        """Poll once without waiting: heartbeats, joins and rebalances happen here."""
        self._consumer.poll(timeout_ms=0)

    def close(self, budget: float) -> None:
        """Leave the group (another member is elected at once when the group is steady)."""
        self.elected = False
        try:
            depart(self._consumer, budget)
            self._consumer.close(autocommit=False, timeout_ms=int(budget * 1000))
        except KafkaError as error:
            print(f"stream-miner: warning: leaving the aggregator group: {describe(error)}", file=self._log)
