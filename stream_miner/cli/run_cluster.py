"""``run --coordination-topic``: this process as one member of a scale-out run (see
:mod:`stream_miner.cluster`)."""

from __future__ import annotations

import argparse
import sys
from collections.abc import Sequence
from typing import TYPE_CHECKING

from stream_miner.cli.options import UsageError

if TYPE_CHECKING:
    from stream_miner.cluster.member import MemberRunner
    from stream_miner.connectors.kafka_source import KafkaSource
    from stream_miner.runtime.event_outbox import EventSink
    from stream_miner.runtime.protocols import DeadLetterSink, TickListener
    from stream_miner.runtime.runner import RunSettings
    from stream_miner.runtime.stop_clock import StopClock

DEFAULT_TICK_WAIT = 30.0  # seconds the aggregator waits for every partition's part of a tick


def check_cluster_options(args: argparse.Namespace) -> None:
    """The options a member needs, and none it cannot honour (one line each)."""
    if args.coordination_topic is None:
        if args.tick_wait is not None:
            raise UsageError("--tick-wait needs --coordination-topic")
        return
    if not (args.source or "").startswith("kafka://"):
        raise UsageError("--coordination-topic needs a Kafka source (--source kafka://HOST:PORT/TOPIC)")
    if args.window_time is None or args.tick_interval is None:
        raise UsageError(
            "--coordination-topic needs --window-time and --tick-interval (ticks fall on event time)"
        )
    if args.min_count is not None:
        raise UsageError(
            "--coordination-topic needs --min-support (a fraction): a count has no share per member"
        )
    for option, value in (("--checkpoint-dir", args.checkpoint_dir), ("--accept-gap", args.accept_gap)):
        if value:
            raise UsageError(
                f"{option} does not go with --coordination-topic: members rebuild windows from the topic"
            )
    if args.tick_wait is not None and not args.tick_wait > 0:
        raise UsageError("--tick-wait must be positive")


class Member:
    """The member's parts, built and started together, closed in reverse."""

    def __init__(
        self,
        args: argparse.Namespace,
        settings: RunSettings,
        source: KafkaSource,
        dead_letters: DeadLetterSink,
        listeners: Sequence[TickListener],
        events: EventSink | None,
        stop: StopClock,
    ) -> None:
        from stream_miner.cluster.aggregator import Aggregator, Shape
        from stream_miner.cluster.member import MemberRunner, member_name
        from stream_miner.cluster.retention import retention_seconds, warn_short_retention
        from stream_miner.cluster.wire import CoordinationTopic
        from stream_miner.connectors.kafka_source import client_options, parse_kafka_url
        from stream_miner.engine.window import TimeWindow

        assert isinstance(settings.window, TimeWindow)
        servers, topic = parse_kafka_url(args.source)
        options = client_options(args.kafka_option)
        self.topic = CoordinationTopic(servers, args.coordination_topic, args.group, options, stop=stop)
        try:
            self.topic.check()
        except ValueError as error:
            self.topic.close()
            raise UsageError(str(error)) from None
        needed = settings.window.seconds * (2 if settings.drift is not None else 1)
        warn_short_retention(topic, retention_seconds(servers, topic, options), needed)
        partitions = source.partition_count()
        if partitions is None:
            self.topic.close()
            raise UsageError(f"--source {args.source}: no such topic")
        name = member_name()
        wait = DEFAULT_TICK_WAIT if args.tick_wait is None else args.tick_wait
        self.runner: MemberRunner = MemberRunner(
            settings,
            source,
            dead_letters,
            self.topic,
            interval=args.tick_interval,
            tick_wait=wait,
            name=name,
            keep_past=settings.drift is not None,
        )
        shape = Shape(settings.window.seconds, args.tick_interval, wait, partitions)
        self.aggregator = Aggregator(
            self.topic, name, settings.params, shape, drift=settings.drift, listeners=listeners, events=events
        )
        self.runner.aggregator = self.aggregator
        print(f"stream-miner: member {name} of group {args.group}, coordinating on {args.coordination_topic}",
              file=sys.stderr, flush=True)  # fmt: skip

    def start(self) -> None:
        self.topic.start()
        self.aggregator.start()

    def close(self) -> None:
        self.aggregator.stop()
        self.topic.close()
