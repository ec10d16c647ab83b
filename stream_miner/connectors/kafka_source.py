"""Baskets from a Kafka topic with kafka-python: consumer group, manual commits, rebalances.

- Offsets are committed only by :meth:`KafkaSource.commit`, which the runtime calls after the
  checkpoint covering them is durable (``enable_auto_commit`` is off); each commit's outcome
  (acknowledged, refused, unknown) goes back to the runtime.
- The group's committed offset decides who counts what. On revocation the runtime
  checkpoints, the offsets are committed and the outcome reported. On assignment the
  committed offsets of the assigned partitions, and of every partition the member has read
  before, are fetched and handed to the runtime, which gives back what another member now
  counts (:mod:`stream_miner.runtime.ledger`); each assigned partition is read from its
  committed offset (from the reset policy's end when nothing is committed). Records read
  ahead for a partition that is then revoked are dropped. The ``lookback`` messages before
  that offset are read first, marked ``learn_only``: the runtime learns their basket ids, so
  a repeat of a basket the previous owner counted is still recognised. The listener is kafka-python's
  asynchronous one: it runs on the client's IO loop, so it uses the coordinator's awaitable
  fetch and commit calls (kafka-python 3.x internals, pinned in pyproject) instead of the
  blocking consumer methods.
- Mining is kept off the poll path: while a tick runs on the loop's worker thread,
  :meth:`KafkaSource.while_busy` keeps polling with every partition paused, so a slow tick
  never exceeds ``max_poll_interval_ms``; records of partitions assigned meanwhile are kept
  for the next :meth:`poll`.
- Any client option passes through (``--kafka-option key=value``); a value ``env:NAME`` is
  read from the environment variable NAME, so secrets never appear on the command line.
  Option values are never logged.
"""

from __future__ import annotations

import os
import socket
import sys
import threading
from collections.abc import Callable
from typing import TextIO, TypeVar

from kafka import KafkaConsumer, KafkaProducer, OffsetAndMetadata, TopicPartition
from kafka.consumer.fetcher import OffsetSpec
from kafka.consumer.subscription_state import AsyncConsumerRebalanceListener
from kafka.errors import (
    CommitFailedError,
    FencedInstanceIdError,
    IllegalGenerationError,
    KafkaError,
    RebalanceInProgressError,
    UnknownMemberIdError,
)

from stream_miner.connectors.kafka_join_fix import keep_finished_joins
from stream_miner.decoding.files import InputError
from stream_miner.decoding.messages import MessageFormat, decode_message
from stream_miner.decoding.records import DeadLetter, SourceRecord
from stream_miner.runtime.ledger import CommitOutcome
from stream_miner.runtime.protocols import Handover, StoppedWaiting

T = TypeVar("T")
DEFAULTS = {"enable_auto_commit": False, "auto_offset_reset": "earliest", "max_poll_records": 500}
SET_BY_US = {
    "bootstrap_servers": "set by the kafka://HOST:PORT/TOPIC address",
    "group_id": "set by --group",
    "enable_auto_commit": "stream-miner commits offsets itself, after each checkpoint",
    "key_deserializer": "messages are decoded by stream-miner",
    "value_deserializer": "messages are decoded by stream-miner",
}
RETRY_FIRST, RETRY_MAX = 1.0, 30.0  # seconds between attempts to reach the brokers
CONNECT_TIMEOUT = 3.0  # seconds for one TCP connection attempt
COMMIT_TIMEOUT_MS = 10_000  # an offset commit without an answer by then has an unknown outcome
# answers that mean the broker did not record a commit
REFUSALS = (
    CommitFailedError,
    RebalanceInProgressError,
    IllegalGenerationError,
    UnknownMemberIdError,
    FencedInstanceIdError,
)


def parse_kafka_url(url: str) -> tuple[str, str]:
    """``kafka://HOST:PORT[,HOST:PORT]/TOPIC`` -> (bootstrap servers, topic)."""
    rest = url.removeprefix("kafka://")
    servers, _, topic = rest.partition("/")
    ports = [server.rpartition(":")[2] for server in servers.split(",")]
    if not servers or not topic or "/" in topic or not all(port.isdigit() for port in ports):
        raise InputError(f"a Kafka address looks like kafka://HOST:PORT/TOPIC, got {url!r}")
    return servers, topic


def client_options(pairs: list[str]) -> dict[str, object]:
    """``key=value`` strings as kafka-python keyword options (numbers and booleans typed).

    The consumer takes the options a consumer knows, producers those a producer knows; an
    option neither knows is an error.
    """
    options: dict[str, object] = {}
    for pair in pairs:
        key, sep, value = pair.partition("=")
        if not sep or not key:
            raise InputError(f"--kafka-option wants key=value, got {pair.split('=')[0]!r}")
        if value.startswith("env:"):
            name = value.removeprefix("env:")
            if name not in os.environ:
                raise InputError(f"--kafka-option {key}: environment variable {name} is not set")
            value = os.environ[name]
        name = key.replace(".", "_")
        if name in SET_BY_US:
            raise InputError(f"--kafka-option {key}: {SET_BY_US[name]}")
        if name not in KafkaConsumer.DEFAULT_CONFIG and name not in KafkaProducer.DEFAULT_CONFIG:
            raise InputError(f"--kafka-option {key}: not a kafka-python client option")
        options[name] = _typed(value)
    return options


def _typed(value: str) -> object:
    if value.lower() in ("true", "false"):
        return value.lower() == "true"
    for number in (int, float):
        try:
            return number(value)
        except ValueError:
            pass
    return value


def connect(servers: str, make: Callable[[], T], stop: threading.Event, log: TextIO) -> T:
    """``make()`` once a bootstrap server answers; until then one line per attempt says why
    not, and the wait before the next attempt doubles up to ``RETRY_MAX`` seconds. Raises
    :class:`StoppedWaiting` when ``stop`` is set meanwhile."""
    delay = RETRY_FIRST
    while True:
        problem = _unreachable(servers)
        if problem is None:
            try:
                return make()
            except KafkaError as error:
                problem = " ".join(str(error).split()) or type(error).__name__
            except (TypeError, ValueError) as error:  # a client option kafka-python refuses
                raise InputError(f"--kafka-option: kafka-python refused the options: {error}") from None
        print(f"stream-miner: cannot reach Kafka at {servers} ({problem}); retrying in {delay:g} s",
              file=log, flush=True)
        if stop.wait(delay):
            raise StoppedWaiting
        delay = min(2 * delay, RETRY_MAX)


def _unreachable(servers: str) -> str | None:
    """None when some bootstrap server accepts a TCP connection, else why none did."""
    problems = []
    for server in servers.split(","):
        host, _, port = server.strip().rpartition(":")
        try:
            socket.create_connection((host.strip("[]") or "localhost", int(port)), timeout=CONNECT_TIMEOUT).close()
            return None
        except ValueError:
            problems.append(f"{server}: no port")
        except OSError as error:
            problems.append(f"{server}: {error.strerror or type(error).__name__}")
    return "; ".join(problems)


class KafkaSource(AsyncConsumerRebalanceListener):
    """Reads one topic as a member of a consumer group."""

    def __init__(
        self,
        url: str,
        group: str,
        message_format: MessageFormat,
        options: dict[str, object] | None = None,
        *,
        stop: threading.Event | None = None,
        log: TextIO = sys.stderr,
        lookback: int = 0,
    ) -> None:
        servers, self.topic = parse_kafka_url(url)
        self._lookback = lookback
        self._learn_until: dict[int, int] = {}  # partition -> first offset counted; before: ids only
        self.name = f"kafka:{self.topic}"
        self._format = message_format
        self.shares_partitions = True
        self.handover: Handover | None = None
        self._backlog: list[SourceRecord] = []
        self._next_offsets: dict[int, int] = {}  # per partition, after the last record read
        settings = DEFAULTS | {k: v for k, v in (options or {}).items() if k in KafkaConsumer.DEFAULT_CONFIG}
        self._max_records = int(settings.get("max_poll_records", 500))  # type: ignore[call-overload]
        self._from_latest = settings.get("auto_offset_reset") == "latest"
        self._consumer = connect(servers, lambda: KafkaConsumer(bootstrap_servers=servers, group_id=group, **settings),
                                  stop or threading.Event(), log)
        keep_finished_joins(self._consumer)
        self._consumer.subscribe([self.topic], listener=self)

    # ------------------------------------------------------------- rebalances
    async def on_partitions_revoked(self, revoked: set[TopicPartition]) -> None:
        self._drop_backlog(revoked)
        if not revoked or self.handover is None:
            return
        positions = self.handover.before_revoke()  # checkpoint written and durable
        leaving = {tp.partition for tp in revoked}
        ours = {p: o for p, o in positions.items() if p in leaving}
        if ours:
            self.handover.after_commit(ours, await self._commit_async(ours))

    async def on_partitions_lost(self, lost: set[TopicPartition]) -> None:
        """The group dropped this member (no commit is possible any more): the next
        assignment's committed offsets settle what it gives back."""
        self._drop_backlog(lost)

    async def on_partitions_assigned(self, assigned: set[TopicPartition]) -> None:
        mine = {tp.partition for tp in assigned}
        read_before = self.handover.held_partitions() if self.handover else set()
        asked = {TopicPartition(self.topic, p) for p in mine | read_before}
        found = await self._consumer._coordinator.fetch_committed_offsets_async(asked)
        committed = {tp.partition: _offset(found.get(tp)) for tp in asked}
        starts = self.handover.on_assigned(committed, mine) if self.handover else committed
        earliest = await self._earliest({tp for tp in assigned if starts.get(tp.partition)})
        self._learn_until = {}
        for tp in assigned:
            start = starts.get(tp.partition)
            if start is not None:
                first = max(start - self._lookback, earliest.get(tp, start))
                self._consumer.seek(tp, first)
                if first < start:
                    self._learn_until[tp.partition] = start
            elif self._from_latest:
                self._consumer.seek_to_end(tp)
            else:
                self._consumer.seek_to_beginning(tp)

    async def _earliest(self, partitions: set[TopicPartition]) -> dict[TopicPartition, int]:
        """The first offset still in the log of each partition (none asked: no lookback)."""
        if not partitions or not self._lookback:
            return {}
        found = await self._consumer._fetcher._fetch_offsets_by_times_async(
            {tp: OffsetSpec.EARLIEST for tp in partitions}, timeout_ms=COMMIT_TIMEOUT_MS
        )
        return {tp: found[tp].offset for tp in partitions if found.get(tp) is not None}

    async def _commit_async(self, positions: dict[int, int]) -> CommitOutcome:
        try:
            await self._consumer._coordinator._commit_offsets_sync_async(
                self._offsets(positions), timeout_ms=COMMIT_TIMEOUT_MS
            )
        except REFUSALS as error:
            _warn_uncommitted(error, "refused")
            return CommitOutcome.REFUSED
        except KafkaError as error:
            _warn_uncommitted(error, "unanswered")
            return CommitOutcome.UNKNOWN
        return CommitOutcome.ACKED

    def _drop_backlog(self, partitions: set[TopicPartition]) -> None:
        """Forget records read ahead (during a tick) for ``partitions``: their next owner
        reads them from the committed offset."""
        gone = {tp.partition for tp in partitions}
        self._backlog = [record for record in self._backlog if record.partition not in gone]

    # ----------------------------------------------------------------- source
    def seek(self, positions: dict[int, int]) -> None:
        """Nothing to do here: where each partition is read from is settled on assignment,
        from the group's committed offsets and the runtime's ledger."""

    def poll(self, max_records: int = 500) -> list[SourceRecord]:
        if self._backlog:
            out, self._backlog = self._backlog, []
            return out
        return self._records(
            self._consumer.poll(timeout_ms=200, max_records=min(max_records, self._max_records))
        )

    def while_busy(self, busy: Callable[[], bool]) -> None:
        """Keep the group membership alive while ``busy()`` (a tick on a worker thread) says
        so, by polling with every partition paused; records of partitions assigned meanwhile
        are kept for the next :meth:`poll`."""
        paused = set(self._consumer.assignment())
        self._consumer.pause(*paused)
        try:
            while busy():
                self._backlog += self._records(self._consumer.poll(timeout_ms=100))
        finally:
            self._consumer.resume(*(paused & set(self._consumer.assignment())))

    def _records(self, batches: dict) -> list[SourceRecord]:
        for tp, messages in batches.items():
            if messages:
                self._next_offsets[tp.partition] = messages[-1].offset + 1
        return [
            SourceRecord(
                self._decode(message.value, tp.partition, message.offset),
                tp.partition,
                message.offset,
                message.offset < self._learn_until.get(tp.partition, -1),
            )
            for tp, messages in batches.items()
            for message in messages
        ]

    def exhausted(self) -> bool:
        return False  # a topic has no end; stop with SIGTERM

    def position(self) -> str | None:
        """How far this member is behind the newest messages of its partitions (as of the
        last fetch)."""
        lag = 0
        for tp in self._consumer.assignment():
            newest = self._consumer.highwater(tp)
            if newest is None:
                return None
            lag += max(0, newest - self._next_offsets.get(tp.partition, newest))
        return f"{lag:,} messages behind"

    def commit(self, positions: dict[int, int]) -> tuple[dict[int, int], CommitOutcome]:
        """Commit the next offsets of the partitions this member owns (others are not its to
        commit); return those and what became of the commit."""
        owned = {tp.partition for tp in self._consumer.assignment()}
        ours = {p: o for p, o in positions.items() if p in owned}
        if not ours:
            return ours, CommitOutcome.ACKED
        try:
            self._consumer.commit(self._offsets(ours), timeout_ms=COMMIT_TIMEOUT_MS)
        except REFUSALS as error:  # e.g. a rebalance in progress: the next checkpoint retries
            _warn_uncommitted(error, "refused")
            return ours, CommitOutcome.REFUSED
        except KafkaError as error:
            _warn_uncommitted(error, "unanswered")
            return ours, CommitOutcome.UNKNOWN
        return ours, CommitOutcome.ACKED

    def has_progress(self) -> bool:
        """True when the group has committed offsets on this topic."""
        partitions = self._consumer.partitions_for_topic(self.topic) or set()
        return any(
            _offset(self._consumer.committed(TopicPartition(self.topic, p), metadata=True)) is not None
            for p in partitions
        )

    def _offsets(self, positions: dict[int, int]) -> dict:
        return {TopicPartition(self.topic, p): OffsetAndMetadata(o, "", -1) for p, o in positions.items()}

    def close(self) -> None:
        try:
            self._consumer.close(autocommit=False)
        except KafkaError as error:
            print(f"stream-miner: warning: closing the Kafka consumer: {error}", file=sys.stderr)

    def _decode(self, value: bytes | None, partition: int, offset: int):
        if value is None:
            return DeadLetter(b"", "empty message", "a message without a value", self.name, partition, offset)
        return decode_message(value, self._format, source=self.name, partition=partition, offset=offset)


def _offset(committed: OffsetAndMetadata | int | None) -> int | None:
    """A committed offset as an int; None when nothing is committed."""
    offset = committed.offset if isinstance(committed, OffsetAndMetadata) else committed
    return offset if offset is not None and offset >= 0 else None


def _warn_uncommitted(error: KafkaError, how: str) -> None:
    print(
        f"stream-miner: warning: offset commit {how} ({type(error).__name__}); "
        "the next checkpoint commits again",
        file=sys.stderr,
        flush=True,
    )
