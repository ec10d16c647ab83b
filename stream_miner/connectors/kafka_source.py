"""Baskets from a Kafka topic with kafka-python: consumer group, manual commits, rebalances.

- Offsets are committed only by :meth:`KafkaSource.commit`, which the runtime calls after the
  checkpoint covering them is durable (``enable_auto_commit`` is off).
- On assignment each partition is positioned at the later of the checkpointed next offset
  and the group's committed offset: after a restart the checkpoint decides; after a partition
  comes back from another member, what that member committed decides (it counted those
  baskets in its own window).
- On revocation the runtime's handler checkpoints first, then the offsets it covers are
  committed. The listener is kafka-python's asynchronous one: it runs on the client's IO
  loop, so it uses the coordinator's awaitable fetch and commit calls (kafka-python 3.x
  internals, pinned in pyproject) instead of the blocking consumer methods.
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
from kafka.consumer.subscription_state import AsyncConsumerRebalanceListener
from kafka.errors import KafkaError

from stream_miner.decoding.files import InputError
from stream_miner.decoding.messages import MessageFormat, decode_message
from stream_miner.decoding.records import DeadLetter, SourceRecord
from stream_miner.runtime.protocols import StoppedWaiting

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
    ) -> None:
        servers, self.topic = parse_kafka_url(url)
        self.name = f"kafka:{self.topic}"
        self._format = message_format
        self._checkpointed: dict[int, int] = {}
        self.revoke_handler: Callable[[], dict[int, int]] | None = None
        self._backlog: list[SourceRecord] = []
        self._next_offsets: dict[int, int] = {}  # per partition, after the last record read
        settings = DEFAULTS | {k: v for k, v in (options or {}).items() if k in KafkaConsumer.DEFAULT_CONFIG}
        self._max_records = int(settings.get("max_poll_records", 500))  # type: ignore[call-overload]
        self._consumer = connect(servers, lambda: KafkaConsumer(bootstrap_servers=servers, group_id=group, **settings),
                                  stop or threading.Event(), log)
        self._consumer.subscribe([self.topic], listener=self)

    # ------------------------------------------------------------- rebalances
    async def on_partitions_revoked(self, revoked: set[TopicPartition]) -> None:
        if not revoked or self.revoke_handler is None:
            return
        positions = self.revoke_handler()  # checkpoint written and durable
        self._checkpointed.update(positions)
        offsets = self._offsets({tp.partition for tp in revoked}, positions)
        if not offsets:
            return
        try:
            await self._consumer._coordinator._commit_offsets_sync_async(offsets)
        except KafkaError as error:  # the group already moved on: the last periodic commit stands
            print(
                f"stream-miner: warning: offsets not committed before the rebalance "
                f"({type(error).__name__}); the next owner of those partitions starts at the "
                "last periodic commit",
                file=sys.stderr,
            )

    async def on_partitions_assigned(self, assigned: set[TopicPartition]) -> None:
        committed = await self._consumer._coordinator.fetch_committed_offsets_async(set(assigned))
        for tp in assigned:
            theirs = committed.get(tp)
            candidates = [
                o
                for o in (theirs.offset if theirs else None, self._checkpointed.get(tp.partition))
                if o is not None and o >= 0
            ]
            if candidates:
                self._consumer.seek(tp, max(candidates))

    # ----------------------------------------------------------------- source
    def seek(self, positions: dict[int, int]) -> None:
        """Remember the checkpointed next offsets; applied when partitions are assigned."""
        self._checkpointed = dict(positions)

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
                self._decode(message.value, tp.partition, message.offset), tp.partition, message.offset
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

    def commit(self, positions: dict[int, int]) -> None:
        """Commit next offsets of the partitions this member still owns."""
        self._checkpointed.update(positions)
        offsets = self._offsets({tp.partition for tp in self._consumer.assignment()}, positions)
        if not offsets:
            return
        try:
            self._consumer.commit(offsets)
        except KafkaError as error:  # e.g. a rebalance in progress: the next checkpoint retries
            print(f"stream-miner: warning: offset commit deferred ({type(error).__name__})", file=sys.stderr)

    def _offsets(self, partitions: set[int], positions: dict[int, int]) -> dict:
        return {
            TopicPartition(self.topic, p): OffsetAndMetadata(o, "", -1)
            for p, o in positions.items()
            if p in partitions
        }

    def close(self) -> None:
        try:
            self._consumer.close(autocommit=False)
        except KafkaError as error:
            print(f"stream-miner: warning: closing the Kafka consumer: {error}", file=sys.stderr)

    def _decode(self, value: bytes | None, partition: int, offset: int):
        if value is None:
            return DeadLetter(b"", "empty message", "a message without a value", self.name, partition, offset)
        return decode_message(value, self._format, source=self.name, partition=partition, offset=offset)
