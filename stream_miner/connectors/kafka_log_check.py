"""Does a Kafka topic's log still hold what a checkpoint and the consumer group say was read?

At start-up (after the checkpoint is restored, before consuming) a probe consumer that joins
no group reads the topic's id from the metadata, each partition's first offset (ListOffsets
earliest) and end (the high watermark of a fetch: tansu answers ListOffsets latest with the
base offset of the last batch + 1, below the real end), and the group's committed offsets.
A checkpointed or committed next offset before the log's first offset means messages were
deleted unread (retention); one past the log's end, or a topic id unlike the one the
checkpoint recorded, means the log was lost or recreated. Either stops the run with one line
naming what was found and the options to go on, unless one of them was given:

- ``--accept-new-log``: the checkpoint was dropped (like ``--start-fresh``); every partition
  is read from the log's first offset, and that offset is committed for the group first, so
  stale committed offsets cannot skip the new log;
- ``--accept-gap``: the window is kept; the partitions found wrong are read on from the
  log's first offset (committed likewise).

While running, :class:`LogWatch` stops the run the same way when a fetch's high watermark
falls below what was already read (a log lost under a running consumer: the broker may
answer an out-of-range fetch with an empty batch), when the topic's id changes, and when
kafka-python reports an out-of-range position (its own reset is off: ``auto_offset_reset``
is "none" inside :class:`~stream_miner.connectors.kafka_source.KafkaSource`).
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from enum import Enum

from kafka import KafkaConsumer, OffsetAndMetadata, TopicPartition
from kafka.errors import LogTruncationError, OffsetOutOfRangeError

from stream_miner.runtime.protocols import SourceChanged

PROBE_TIMEOUT = 10.0  # seconds for one look at the log (metadata, offsets, one fetch)
SHOWN = 3  # problems named in the one line; the rest are counted
NEW_LOG = "--accept-new-log (drop the window and read the log from its first offset)"
GAP = "--accept-gap (keep the window and read on from the log's first offset)"
FRESH = "--start-fresh (drop the checkpoint; the group's committed offsets decide)"


class Accept(Enum):
    """What the user accepts about a changed log (the command-line options)."""

    NOTHING = "stop"
    NEW_LOG = "new-log"
    GAP = "gap"


@dataclass(frozen=True)
class LogState:
    """One look at a topic's log and its group's progress."""

    topic_id: str | None
    first: dict[int, int]  # first offset the log holds, per partition
    end: dict[int, int]  # next offset to be written (high watermark), per partition
    committed: dict[int, int]  # the group's committed next offsets


@dataclass(frozen=True)
class Problem:
    """Something the log no longer holds; ``partition`` None: the whole topic."""

    partition: int | None
    text: str
    checkpoint_only: bool  # only the checkpoint is at fault (--start-fresh would do)


def topic_id(consumer: KafkaConsumer, topic: str) -> str | None:
    """The topic's id from the client's metadata; None when the broker reports none."""
    found = consumer._client.cluster.topic_id(topic)  # kafka-python 3 (metadata v10+)
    return str(found) if found is not None and found.int else None


def look(probe: KafkaConsumer, topic: str) -> LogState | None:
    """The log of ``topic`` as ``probe`` (a consumer with the group's id, subscribed to
    nothing) sees it now; None when the topic does not exist (yet)."""
    partitions = probe.partitions_for_topic(topic)
    if not partitions:
        return None
    tps = [TopicPartition(topic, p) for p in sorted(partitions)]
    timeout_ms = int(PROBE_TIMEOUT * 1000)
    first = probe.beginning_offsets(tps, timeout_ms=timeout_ms)
    listed_end = probe.end_offsets(tps, timeout_ms=timeout_ms)
    committed = probe._coordinator.fetch_committed_offsets(set(tps), timeout_ms=timeout_ms)
    return LogState(
        topic_id(probe, topic),
        {tp.partition: first[tp] for tp in tps},
        _high_watermarks(probe, tps, listed_end),
        {tp.partition: meta.offset for tp, meta in committed.items() if meta.offset >= 0},
    )


def _high_watermarks(
    probe: KafkaConsumer, tps: list[TopicPartition], listed_end: dict[TopicPartition, int]
) -> dict[int, int]:
    """Each partition's end from a fetch at its listed end (a valid offset: the listed end
    is never past the real one)."""
    probe.assign(tps)
    for tp in tps:
        probe.seek(tp, listed_end[tp])
    deadline = time.monotonic() + PROBE_TIMEOUT
    while any(probe.highwater(tp) is None for tp in tps) and time.monotonic() < deadline:
        probe.poll(timeout_ms=200)
    return {tp.partition: max(listed_end[tp], probe.highwater(tp) or 0) for tp in tps}


def problems(state: LogState, checkpointed: dict[int, int], recorded_id: str | None) -> list[Problem]:
    """What the checkpoint (``checkpointed`` offsets, made when the topic had
    ``recorded_id``) and the group's commits expect that the log no longer holds."""
    found = []
    if recorded_id and state.topic_id and recorded_id != state.topic_id:
        text = f"the topic was recreated (its id is {state.topic_id}, the checkpoint's {recorded_id})"
        found.append(Problem(None, text, checkpoint_only=False))
    for partition in sorted(state.first):
        first, end = state.first[partition], state.end[partition]
        for whose, offsets in (("checkpointed", checkpointed), ("committed", state.committed)):
            offset = offsets.get(partition)
            if offset is None or first <= offset <= end:
                continue
            if offset < first:
                text = (
                    f"partition {partition}: {whose} next offset {offset} is before the log's first "
                    f"offset {first} (messages {offset}-{first - 1} were deleted unread)"
                )
            else:
                text = (
                    f"partition {partition}: {whose} next offset {offset} is past the log's end "
                    f"{end} (the log was lost or cut)"
                )
            found.append(Problem(partition, text, checkpoint_only=whose == "checkpointed"))
    return found


def refusal(topic: str, servers: str, found: list[Problem]) -> SourceChanged:
    """The one-line stop: what was found and the options to go on."""
    shown = "; ".join(problem.text for problem in found[:SHOWN])
    more = f"; and {len(found) - SHOWN} more" if len(found) > SHOWN else ""
    options = [NEW_LOG, GAP] + ([FRESH] if all(p.checkpoint_only for p in found) else [])
    return SourceChanged(
        f"Kafka topic {topic} at {servers} no longer holds what was read: {shown}{more}; "
        f"to go on, restart with {', or '.join(options)}"
    )


def restart_offsets(
    probe: KafkaConsumer, topic: str, state: LogState, found: list[Problem], accept: Accept
) -> dict[int, int]:
    """The first offsets of the partitions to read again (every partition for a new log or a
    recreated topic, else those found wrong), committed for the group so that no stale
    commit takes precedence."""
    whole = accept is Accept.NEW_LOG or any(problem.partition is None for problem in found)
    partitions = set(state.first) if whole else {p.partition for p in found if p.partition is not None}
    offsets = {p: state.first[p] for p in sorted(partitions)}
    if offsets:
        probe.commit(
            {TopicPartition(topic, p): OffsetAndMetadata(o, "", -1) for p, o in offsets.items()},
            timeout_ms=int(PROBE_TIMEOUT * 1000),
        )
    return offsets


class LogWatch:
    """Notices, while running, that the log no longer holds what was read."""

    def __init__(self, topic: str, servers: str, topic_id: str | None, read: dict[int, int]) -> None:
        self.topic = topic
        self.servers = servers
        self.topic_id = topic_id
        self.read = dict(read)  # per partition: the next offset after what is known to exist

    def advance(self, partition: int, next_offset: int) -> None:
        """Records up to ``next_offset`` were read from ``partition``."""
        self.read[partition] = max(next_offset, self.read.get(partition, 0))

    def check(self, consumer: KafkaConsumer) -> SourceChanged | None:
        """The stop to make when the topic's id changed or a fetch's high watermark of an
        assigned partition is below what was read."""
        now = topic_id(consumer, self.topic)
        if now is not None and self.topic_id is not None and now != self.topic_id:
            text = f"the topic was recreated while it was read (its id is {now}, it was {self.topic_id})"
            return self._stop([text])
        self.topic_id = self.topic_id or now
        shrunk = []
        for tp in sorted(consumer.assignment()):
            end, read = consumer.highwater(tp), self.read.get(tp.partition)
            if end is not None and read is not None and end < read:
                shrunk.append(f"partition {tp.partition}: the log now ends at {end}, but offsets up to "
                              f"{read - 1} were read (the log was lost or cut)")
        return self._stop(shrunk) if shrunk else None

    def out_of_range(self, error: OffsetOutOfRangeError | LogTruncationError) -> SourceChanged:
        """The stop for kafka-python's report that a position is outside the log."""
        positions = error.args[0] if error.args and isinstance(error.args[0], dict) else {}
        texts = [
            f"partition {tp.partition}: offset {getattr(offset, 'offset', offset)} is outside the log "
            f"({type(error).__name__})"
            for tp, offset in positions.items()
        ]
        return self._stop(texts or [f"a position is outside the log ({type(error).__name__})"])

    def _stop(self, texts: list[str]) -> SourceChanged:
        return SourceChanged(
            f"Kafka topic {self.topic} at {self.servers} no longer holds what was read: "
            f"{'; '.join(texts[:SHOWN])}; the checkpoint keeps what was read; restart with "
            f"{NEW_LOG}, or {GAP}"
        )
