"""The coordination topic: what the members of one scale-out run say to each other.

A message is a JSON object (``kind``, ``tick``, ``sender`` and a body) compressed with zlib
and cut into records of at most ``PART_BYTES``; the headers say which message a record
belongs to and where. Every member reads the topic's one partition from its start on a
thread of its own and keeps what matters in a :class:`Board`, which the member's tick and
the aggregator wait on. The same thread keeps this member in the aggregator election
(:mod:`stream_miner.cluster.election`). Records are sent with ``acks="all"`` and an
idempotent producer, and :meth:`CoordinationTopic.send` returns only once the broker has
them.
"""

from __future__ import annotations

import json
import sys
import threading
import time
import uuid
import zlib
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import TextIO

from kafka import KafkaConsumer, KafkaProducer, TopicPartition
from kafka.errors import KafkaError

from stream_miner.cluster.election import Election
from stream_miner.connectors.kafka_source import CLOSE_TIMEOUT, Retry, connect, describe
from stream_miner.connectors.sinks import safe_producer
from stream_miner.runtime.protocols import StoppedWaiting
from stream_miner.runtime.stop_clock import StopClock

PART_BYTES = 256 * 1024  # the most one record carries (a broker's usual limit is 1 MiB)
SEND_TIMEOUT = 10.0  # seconds one attempt to send a message waits for the broker
POLL_MS = 100  # the reader's poll timeout

PART, ASK, ANSWER, CLOSE, DELIVERED = "part", "ask", "answer", "close", "delivered"
KINDS = (PART, ASK, ANSWER, CLOSE, DELIVERED)


@dataclass(frozen=True)
class Message:
    """One message: its kind, the tick (the event time the window ends at), who sent it and
    what it says."""

    kind: str
    tick: float
    sender: str
    body: dict

    def records(self) -> list[tuple[bytes, bytes, list[tuple[str, bytes]]]]:
        """The message as Kafka records: (key, value, headers), in order."""
        data = json.dumps(
            {"kind": self.kind, "tick": self.tick, "sender": self.sender, "body": self.body},
            separators=(",", ":"),
            allow_nan=False,
        ).encode()
        packed = zlib.compress(data, 1)
        pieces = [packed[i : i + PART_BYTES] for i in range(0, len(packed), PART_BYTES)] or [b""]
        name = uuid.uuid4().hex.encode()
        key = f"{self.kind}:{self.tick!r}:{self.sender}".encode()
        return [
            (key, piece, [("message", name), ("piece", f"{i}/{len(pieces)}".encode())])
            for i, piece in enumerate(pieces)
        ]


class Reassembly:
    """Puts messages back together from their records (a record that does not belong to a
    message, or a message that does not parse, is skipped with a warning)."""

    def __init__(self, log: TextIO) -> None:
        self._open: dict[bytes, list[bytes]] = {}
        self._log = log

    def take(self, value: bytes | None, headers: list[tuple[str, bytes]] | None) -> Message | None:
        """Feed one record; the message it completes, if any."""
        meta = dict(headers or [])
        name, piece = meta.get("message"), meta.get("piece")
        if name is None or piece is None or value is None:
            return self._skip("a record without message headers")
        try:
            index, count = (int(x) for x in piece.decode().split("/"))
        except ValueError:
            return self._skip("a record with a malformed piece header")
        parts = self._open.setdefault(name, [])
        if index != len(parts):  # a piece out of order: the message is incomplete
            self._open.pop(name, None)
            return self._skip("a message with a piece missing")
        parts.append(value)
        if len(parts) < count:
            return None
        del self._open[name]
        try:
            data = json.loads(zlib.decompress(b"".join(parts)))
            message = Message(str(data["kind"]), float(data["tick"]), str(data["sender"]), dict(data["body"]))
        except (zlib.error, ValueError, KeyError, TypeError) as error:
            return self._skip(f"a message that does not parse ({type(error).__name__})")
        return message if message.kind in KINDS else self._skip(f"a message of unknown kind {message.kind!r}")

    def _skip(self, what: str) -> Message | None:
        """Say that a record or message was skipped; nothing to hand on."""
        print(f"stream-miner: warning: coordination topic: skipped {what}", file=self._log, flush=True)
        return None


@dataclass
class Board:
    """What was said on the coordination topic, as far as it was read: parts and answers of
    ticks not yet closed, the questions asked, which ticks were closed, the newest
    aggregator state, and per source partition the offset its last owner had read to and the
    newest tick a part named it in.
    Waiters sleep on ``changed``."""

    changed: threading.Condition = field(default_factory=threading.Condition)
    parts: dict[float, dict[str, dict]] = field(default_factory=dict)
    asks: dict[float, list[dict]] = field(default_factory=dict)
    answers: dict[tuple[float, int], dict[str, dict]] = field(default_factory=dict)
    closed: dict[float, dict] = field(default_factory=dict)  # tick -> the first close said of it
    last_closed: float = float("-inf")
    state: dict | None = None  # the newest close that carries the aggregator's state
    delivered: dict | None = None  # the newest delivery record
    read_to: dict[int, int] = field(default_factory=dict)
    claimed: dict[int, float] = field(
        default_factory=dict
    )  # per partition: the newest tick a part named it in

    def take(self, message: Message) -> None:
        """Record ``message`` (under the lock) and wake the waiters."""
        tick, body = message.tick, message.body
        with self.changed:
            if message.kind == PART:
                if tick > self.last_closed:
                    self.parts.setdefault(tick, {})[message.sender] = body
                for partition, (_, read_to) in body["partitions"].items():
                    self.read_to[int(partition)] = int(read_to)
                    self.claimed[int(partition)] = max(tick, self.claimed.get(int(partition), tick))
            elif message.kind == ASK:
                if tick > self.last_closed:
                    self.asks.setdefault(tick, []).append(body)
            elif message.kind == ANSWER:
                if tick > self.last_closed:
                    self.answers.setdefault((tick, int(body["round"])), {})[message.sender] = body
            elif message.kind == CLOSE:
                if tick not in self.closed and tick > self.last_closed:
                    self.closed[tick] = {k: v for k, v in body.items() if k not in ("state", "events")}
                    self.last_closed = tick
                    if "state" in body:
                        self.state = {**body, "tick": tick}  # only the newest state is kept
                    self._forget_up_to(tick)
            elif message.kind == DELIVERED:
                self.delivered = body
            self.changed.notify_all()

    def _forget_up_to(self, tick: float) -> None:
        self.parts = {t: v for t, v in self.parts.items() if t > tick}
        self.asks = {t: v for t, v in self.asks.items() if t > tick}
        self.answers = {k: v for k, v in self.answers.items() if k[0] > tick}
        if len(self.closed) > 64:
            self.closed = dict(sorted(self.closed.items())[-32:])

    def wait(self, ready: Callable[[], bool], timeout: float, stop: threading.Event | None = None) -> bool:
        """Wait until ``ready()`` (called under the lock) is true, at most ``timeout``
        seconds or until ``stop`` is set; whether it became true."""
        deadline = time.monotonic() + timeout
        with self.changed:
            while not ready():
                left = deadline - time.monotonic()
                if left <= 0 or (stop is not None and stop.is_set()):
                    return False
                self.changed.wait(min(left, 0.1))
            return True


class CoordinationTopic:
    """Sends to and reads the coordination topic (one partition), and holds this member's
    place in the aggregator election."""

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
        self.servers, self.topic, self._stop, self._log = servers, topic, stop, log
        self.board = Board()
        consumer_options = {k: v for k, v in options.items() if k in KafkaConsumer.DEFAULT_CONFIG}
        consumer_options.pop("group_id", None)
        self._producer, _ = safe_producer(f"kafka://{servers}/{topic}", options, stop, {"linger_ms": 0})
        reader_options = consumer_options | {"enable_auto_commit": False, "auto_offset_reset": "earliest"}
        self._reader = connect(
            servers, lambda: KafkaConsumer(bootstrap_servers=servers, **reader_options), stop, log
        )
        self._partition = TopicPartition(topic, 0)
        self._reader.assign([self._partition])
        self._reader.seek_to_beginning(self._partition)
        self.election = Election(servers, topic, f"{group}.aggregator", consumer_options, stop=stop, log=log)
        self._reassembly = Reassembly(log)
        self._sync_to: int | None = None  # an end offset a caller waits for the reader to reach
        self._synced = threading.Event()
        self._running = True
        self._thread = threading.Thread(target=self._read, name="stream-miner-coordination", daemon=True)

    def check(self) -> None:
        """Refuse a coordination topic that is missing or has more than one partition (one
        line, no traceback)."""
        partitions = self._reader.partitions_for_topic(self.topic)
        if not partitions:
            raise ValueError(
                f"--coordination-topic {self.topic}: no such topic at {self.servers}; "
                "create it with one partition"
            )
        if len(partitions) != 1:
            raise ValueError(
                f"--coordination-topic {self.topic} has {len(partitions)} partitions; it needs exactly one "
                "(all members must read every message in order)"
            )

    def start(self) -> None:
        """Start reading (and joining the election) on a thread of its own."""
        self._thread.start()

    def send(self, message: Message) -> None:
        """Send ``message``; return once the broker holds every record of it. Retries while
        the broker does not answer (a line per attempt); raises :class:`StoppedWaiting` once
        a stop's time bound is spent."""
        retry = Retry(f"sending to the coordination topic {self.topic}", self.servers, self._log)
        while True:
            try:
                futures = [
                    self._producer.send(self.topic, key=key, value=value, headers=headers, partition=0)
                    for key, value, headers in message.records()
                ]
                for future in futures:
                    future.get(timeout=self._stop.budget(SEND_TIMEOUT) or 0.001)
                retry.succeeded()
                return
            except KafkaError as error:
                if self._stop.spent():
                    raise StoppedWaiting from None
                self._stop.wait(retry.failed(describe(error)))

    def sync(self, timeout: float) -> bool:
        """Wait until the reader has read everything on the topic now; whether it did in time."""
        self._synced.clear()
        self._sync_to = -1  # the reader thread looks the end up (the consumer is its own)
        return self._synced.wait(timeout)

    def _read(self) -> None:
        while self._running:
            try:
                self.election.keep_up()
                self._read_once()
            except KafkaError as error:  # the broker went away: the next round tries again
                print(
                    f"stream-miner: coordination topic: {describe(error)}; retrying",
                    file=self._log,
                    flush=True,
                )
                time.sleep(1.0)

    def _read_once(self) -> None:
        batches = self._reader.poll(timeout_ms=POLL_MS, max_records=2000)
        for records in batches.values():
            for record in records:
                message = self._reassembly.take(record.value, record.headers)
                if message is None:
                    continue
                try:
                    self.board.take(message)
                except (KeyError, TypeError, ValueError, AttributeError) as error:
                    print(
                        f"stream-miner: warning: coordination topic: skipped a {message.kind} message "
                        f"of {message.sender} ({type(error).__name__})",
                        file=self._log,
                        flush=True,
                    )
        if self._sync_to is not None:
            if self._sync_to < 0:
                self._sync_to = self._reader.end_offsets([self._partition])[self._partition]
            if self._reader.position(self._partition) >= self._sync_to:
                self._sync_to = None
                self._synced.set()

    def close(self) -> None:
        """Stop reading, leave the election and close the clients within the stop bound."""
        self._running = False
        if self._thread.is_alive():
            self._thread.join(timeout=2.0)
        budget = self._stop.budget(CLOSE_TIMEOUT)
        self.election.close(budget)
        for client in (self._reader, self._producer):
            try:
                if isinstance(client, KafkaProducer):
                    client.close(timeout=self._stop.budget(CLOSE_TIMEOUT))
                else:
                    client.close(autocommit=False, timeout_ms=int(self._stop.budget(CLOSE_TIMEOUT) * 1000))
            except KafkaError as error:
                print(
                    f"stream-miner: warning: closing a coordination client: {describe(error)}", file=self._log
                )
