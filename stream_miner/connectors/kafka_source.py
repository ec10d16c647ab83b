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
- Broker errors while reading (the broker stopped, killed or restarting) are retried with a
  growing pause and one line per attempt; the stream resumes by itself when the broker is
  back. Commits end within ``COMMIT_TIMEOUT`` (a failed one is retried at the next
  checkpoint) and, once a stop was asked for, within what is left of ``--stop-within``, as
  does closing. kafka-python's own offset reset is off (``auto_offset_reset`` "none"), so a
  position outside the log is reported (:mod:`~stream_miner.connectors.kafka_log_check`)
  instead of silently reset; the user's reset applies only where nothing was committed.
- Any client option passes through (``--kafka-option key=value``); a value ``env:NAME`` is
  read from the environment variable NAME, so secrets never appear on the command line.
  Option values are never logged.
"""

from __future__ import annotations

import os
import socket
import sys
import threading
import time
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
    LogTruncationError,
    NoOffsetForPartitionError,
    OffsetOutOfRangeError,
    RebalanceInProgressError,
    RetriableError,
    UnknownMemberIdError,
)

from stream_miner.connectors.kafka_join_fix import depart, keep_finished_joins
from stream_miner.connectors.kafka_log_check import Accept, LogWatch, look, problems, refusal, restart_offsets
from stream_miner.decoding.files import InputError
from stream_miner.decoding.messages import MessageFormat, decode_message
from stream_miner.decoding.records import Basket, DeadLetter, SourceRecord
from stream_miner.runtime.ledger import CommitOutcome
from stream_miner.runtime.protocols import Handover, SourceChanged, StoppedWaiting
from stream_miner.runtime.stop_clock import StopClock

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
COMMIT_TIMEOUT = 5.0  # seconds a commit may take while running; a failed one waits for the next checkpoint
CLOSE_TIMEOUT = 10.0  # seconds the consumer may take to leave its group (less once stopping)
READ_RETRY_MAX = 5.0  # seconds: polls are retried more often, so a stream resumes soon after its broker
COORDINATOR_GRACE = 3.0  # seconds of polls without a group coordinator before reading counts as failed
DETAIL = 160  # characters of a client error's text shown in a line
SLOW_CRC = (
    "stream-miner: warning: the crc32c module is missing, so kafka-python checks record batches in "
    "pure Python (about 2.5x slower to consume); pip install crc32c"
)
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


def native_crc() -> bool:
    """Whether kafka-python checks CRC-32C with the ``crc32c`` C module (else in pure Python)."""
    from kafka.record import util

    return getattr(util, "crc32c_c", None) is not None


def describe(error: KafkaError) -> str:
    """A client error in a few words: its name and detail on one line."""
    text = " ".join(str(error).split()).removesuffix(": None")
    return (text or type(error).__name__)[:DETAIL]


class Retry:
    """Attempts at something a broker must answer: after a failure one line says what
    failed and when the next attempt is, the wait doubling from ``RETRY_FIRST`` up to
    ``longest``; the first success after failures says how long they lasted."""

    def __init__(self, what: str, servers: str, log: TextIO, longest: float = RETRY_MAX) -> None:
        self.what, self.servers, self.log, self.longest = what, servers, log, longest
        self._delay = RETRY_FIRST
        self._next_at = 0.0
        self._failing_since: float | None = None

    def due(self) -> bool:
        """True when the next attempt may be made."""
        return time.monotonic() >= self._next_at

    def failed(self, problem: str) -> float:
        """Note a failed attempt (one line); returns the seconds until the next one."""
        now = time.monotonic()
        if self._failing_since is None:
            self._failing_since = now
        delay, self._delay = self._delay, min(2 * self._delay, self.longest)
        self._next_at = now + delay
        print(f"stream-miner: Kafka at {self.servers}: {self.what} failed ({problem}); retrying in {delay:g} s",
              file=self.log, flush=True)
        return delay

    def succeeded(self) -> None:
        """Note a success: the wait starts small again."""
        if self._failing_since is not None:
            print(f"stream-miner: Kafka at {self.servers}: {self.what} works again after "
                  f"{time.monotonic() - self._failing_since:.1f} s", file=self.log, flush=True)
        self._failing_since, self._delay, self._next_at = None, RETRY_FIRST, 0.0


class _Consumer(KafkaConsumer):
    """A consumer whose blocking commits end within ``COMMIT_TIMEOUT``, or within what is
    left of the stop bound; the last commit's failure is kept for the closing line."""

    def __init__(self, stop_clock: StopClock, **configs: object) -> None:
        self._stop_clock = stop_clock
        self.commit_failure: str | None = None
        super().__init__(**configs)

    def commit(self, offsets: dict | None = None, timeout_ms: int | None = None) -> None:
        if timeout_ms is None:
            timeout_ms = int(self._stop_clock.budget(COMMIT_TIMEOUT) * 1000)
        try:
            super().commit(offsets, timeout_ms=timeout_ms)
        except KafkaError as error:  # kept for close(), then handled by the caller
            self.commit_failure = describe(error)
            raise
        self.commit_failure = None


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
        stop: StopClock | None = None,
        accept: Accept = Accept.NOTHING,
        log: TextIO = sys.stderr,
        lookback: int = 0,
    ) -> None:
        servers, self.topic = parse_kafka_url(url)
        self._lookback = lookback
        self._learn_until: dict[int, int] = {}  # partition -> first offset counted; before: ids only
        self.servers = servers
        self.name = f"kafka:{self.topic}"
        self._format = message_format
        self.shares_partitions = True
        self.handover: Handover | None = None
        self._backlog: list[SourceRecord] = []
        self._owned: set[int] = set()  # the partitions of the last assignment
        self.pause_while_busy = True  # False: read on during a tick, into the backlog
        self._next_offsets: dict[int, int] = {}  # per partition, after the last record read
        self._lag: dict[int, int] = {}  # per assigned partition, as of the last fetch (replaced, never changed)
        self._stop = stop or StopClock()
        self._accept = accept
        self._log = log
        self._reading = Retry(f"reading topic {self.topic}", servers, log, READ_RETRY_MAX)
        self._no_coordinator_since: float | None = None
        self._watch = LogWatch(self.topic, servers, None, {})
        self._changed: SourceChanged | None = None  # found while polling, raised by the next poll()
        settings = DEFAULTS | {k: v for k, v in (options or {}).items() if k in KafkaConsumer.DEFAULT_CONFIG}
        self._max_records = int(settings.get("max_poll_records", 500))  # type: ignore[call-overload]
        self._reset_to = settings.pop("auto_offset_reset")  # applied by _reset(); the client's is "none"
        self._probe_settings = {"bootstrap_servers": servers, "group_id": group, **settings}
        make = lambda: _Consumer(self._stop, auto_offset_reset="none", **self._probe_settings)  # noqa: E731
        self._consumer = connect(servers, make, self._stop, log)
        if settings.get("check_crcs", True) and not native_crc():
            print(SLOW_CRC, file=log, flush=True)
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
        kept, self._owned = self._owned & mine, mine  # kept: this member knows their ids already
        earliest = await self._earliest({tp for tp in assigned if starts.get(tp.partition) and tp.partition not in kept})
        self._learn_until = {}
        unplaced = set()
        for tp in assigned:
            start = starts.get(tp.partition)
            if start is None:
                unplaced.add(tp)
                continue
            first = start if tp.partition in kept else max(start - self._lookback, earliest.get(tp, start))
            self._consumer.seek(tp, first)
            if first < start:
                self._learn_until[tp.partition] = start
        if unplaced and self._reset_to != "none":  # "none": the next poll says so (_reset)
            self._reset(unplaced)

    async def _earliest(self, partitions: set[TopicPartition]) -> dict[TopicPartition, int]:
        """The first offset still in the log of each partition (none asked: no lookback)."""
        if not partitions or not self._lookback:
            return {}
        found = await self._consumer._fetcher._fetch_offsets_by_times_async(
            {tp: OffsetSpec.EARLIEST for tp in partitions}, timeout_ms=int(COMMIT_TIMEOUT * 1000)
        )
        return {tp: found[tp].offset for tp in partitions if found.get(tp) is not None}

    async def _commit_async(self, positions: dict[int, int]) -> CommitOutcome:
        try:
            await self._consumer._coordinator._commit_offsets_sync_async(
                self._offsets(positions), timeout_ms=int(self._stop.budget(COMMIT_TIMEOUT) * 1000)
            )
        except KafkaError as error:
            return _failed_commit(error)
        return CommitOutcome.ACKED

    def _drop_backlog(self, partitions: set[TopicPartition]) -> None:
        """Forget records read ahead (during a tick) for ``partitions``: their next owner
        reads them from the committed offset."""
        gone = {tp.partition for tp in partitions}
        self._backlog = [record for record in self._backlog if record.partition not in gone]

    # ----------------------------------------------------------------- source
    def seek(self, positions: dict[int, int], identity: dict[str, str]) -> dict[int, int]:
        """Check that the log still holds the checkpointed next offsets (``identity``: the
        topic's id when they were checkpointed) and the group's committed ones
        (:mod:`~stream_miner.connectors.kafka_log_check`), then remember where to resume:
        applied when partitions are assigned. Returns those offsets."""
        recorded = identity.get("topic_id")
        self._watch.topic_id = recorded
        check = Retry(f"checking the log of topic {self.topic}", self.servers, self._log)
        while True:
            try:
                resume = self._check_log(positions, recorded)
                break
            except StoppedWaiting:
                return positions  # stopping before anything is read
            except RetriableError as error:  # the broker went away again meanwhile
                if self._stop.wait(check.failed(describe(error))):
                    return positions
            except CommitFailedError:  # the restart offsets' commit, refused by a group with members
                problem = "the group has members: one stopped counts until its session times out"
                if self._stop.wait(check.failed(problem)):
                    return positions
        self._watch.read = dict(resume)
        return resume

    def _check_log(self, positions: dict[int, int], recorded: str | None) -> dict[int, int]:
        """One look at the log with a probe consumer; the offsets to resume at."""
        make = lambda: KafkaConsumer(auto_offset_reset="none", **self._probe_settings)  # noqa: E731
        probe = connect(self.servers, make, self._stop, self._log)
        try:
            state = look(probe, self.topic)
            if state is None:
                return positions  # no such topic yet: nothing to compare
            self._watch.topic_id = state.topic_id or recorded
            found = problems(state, positions, recorded)
            if self._accept is Accept.NEW_LOG or (found and self._accept is Accept.GAP):
                return positions | restart_offsets(probe, self.topic, state, found, self._accept)
            if found:
                raise refusal(self.topic, self.servers, found)
            return positions
        finally:
            probe.close(autocommit=False, timeout_ms=int(self._stop.budget(CLOSE_TIMEOUT) * 1000))

    def identity(self) -> dict[str, str]:
        """The topic's id, where the broker reports one."""
        return {"topic_id": self._watch.topic_id} if self._watch.topic_id else {}

    def poll(self, max_records: int = 500) -> list[SourceRecord]:
        if self._changed is not None:
            raise self._changed
        if self._backlog:
            out, self._backlog = self._backlog, []
            return out
        return self._records(self._fetch(timeout_ms=200, max_records=min(max_records, self._max_records)))

    def _fetch(self, **options: int) -> dict:
        """``consumer.poll(**options)``: after a broker error nothing until the next attempt is
        due (a line says so); a log that no longer holds what was read is kept for
        :meth:`poll` to raise, and what came with it is dropped."""
        if self._changed is not None or not self._reading.due():
            return {}
        try:
            batches = self._consumer.poll(**options)
        except RetriableError as error:  # broker gone or restarting, a request timed out, coordinator moved
            self._reading.failed(describe(error))
            return {}
        except NoOffsetForPartitionError as error:  # nothing committed or checkpointed there
            self._reset(error.args[0])
            return {}
        except (OffsetOutOfRangeError, LogTruncationError) as error:
            self._changed = self._watch.out_of_range(error)
            return {}
        self._changed = self._watch.check(self._consumer)
        if self._changed is not None:
            return {}
        self._lag = self._partition_lag()
        self._note_coordinator(any(batches.values()))
        return batches

    def _note_coordinator(self, got_records: bool) -> None:
        """A poll that raised nothing: reading works unless no group coordinator answered
        for ``COORDINATOR_GRACE`` seconds (a broker killed or stopped raises nothing)."""
        if got_records or not self._consumer._coordinator.coordinator_unknown():
            self._no_coordinator_since = None
            self._reading.succeeded()
            return
        now = time.monotonic()
        if self._no_coordinator_since is None:
            self._no_coordinator_since = now
        elif now - self._no_coordinator_since >= COORDINATOR_GRACE:
            self._reading.failed("no group coordinator answers")

    def _reset(self, partitions: set[TopicPartition]) -> None:
        """Start partitions with no committed or checkpointed offset where the user's
        ``auto_offset_reset`` says."""
        if self._reset_to == "earliest":
            self._consumer.seek_to_beginning(*partitions)
        elif self._reset_to == "latest":
            self._consumer.seek_to_end(*partitions)
        else:
            numbers = ", ".join(str(tp.partition) for tp in sorted(partitions))
            raise InputError(
                f"Kafka topic {self.topic}: partitions {numbers} have no committed offset and "
                f"auto_offset_reset is {self._reset_to!r}; use earliest or latest"
            )

    def while_busy(self, busy: Callable[[], bool]) -> None:
        """Keep the group membership alive while ``busy()`` (a tick on a worker thread) says
        so, by polling with every partition paused; records of partitions assigned meanwhile
        are kept for the next :meth:`poll`."""
        paused = set(self._consumer.assignment()) if self.pause_while_busy else set()
        self._consumer.pause(*paused)
        try:
            while busy():
                fetched = self._records(self._fetch(timeout_ms=100))  # a rebalance in here replaces the backlog
                self._backlog = self._backlog + fetched
        finally:
            self._consumer.resume(*(paused & set(self._consumer.assignment())))

    def _records(self, batches: dict) -> list[SourceRecord]:
        records: list[SourceRecord] = []
        fmt, name = self._format, self.name
        for tp, messages in batches.items():
            if not messages:
                continue
            partition = tp.partition
            self._next_offsets[partition] = messages[-1].offset + 1
            self._watch.advance(partition, messages[-1].offset + 1)
            learn_until = self._learn_until.get(partition, -1)
            for message in messages:
                value, offset = message.value, message.offset
                if value is None:
                    payload: Basket | DeadLetter = DeadLetter(
                        b"", "empty message", "a message without a value", name, partition, offset
                    )
                else:
                    payload = decode_message(value, fmt, source=name, partition=partition, offset=offset)
                records.append(SourceRecord(payload, partition, offset, offset < learn_until))
        return records

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

    def lag(self) -> dict[int, int]:
        """Messages behind the newest per assigned partition, as of the last fetch."""
        return self._lag

    def _partition_lag(self) -> dict[int, int]:
        """The cached high watermark minus the consumer's position, per assigned partition
        where both are known (kafka-python's subscription state: no round trip to a broker)."""
        lag = {}
        for tp, state in list(self._consumer._subscription.assignment.items()):
            if state.highwater is not None and state.position is not None:
                lag[tp.partition] = max(0, state.highwater - state.position.offset)
        return lag

    def assigned(self) -> set[int]:
        """The partitions this member owns now."""
        return {tp.partition for tp in self._consumer.assignment()}

    def highwaters(self) -> dict[int, int]:
        """The offset after the newest message per assigned partition, as of the last fetch
        (where known)."""
        return {
            tp.partition: state.highwater
            for tp, state in list(self._consumer._subscription.assignment.items())
            if state.highwater is not None
        }

    def end_offsets(self) -> dict[int, int] | None:
        """The offset after the newest message of each assigned partition, asked of the
        broker now (None when it does not answer within ``COMMIT_TIMEOUT``)."""
        assigned = list(self._consumer.assignment())
        try:
            found = self._consumer.end_offsets(assigned, timeout_ms=int(COMMIT_TIMEOUT * 1000))
        except KafkaError:
            return None
        return {tp.partition: offset for tp, offset in found.items()}

    def has_backlog(self) -> bool:
        """Whether records read during a tick wait for the next :meth:`poll`."""
        return bool(self._backlog)

    def generation(self) -> int:
        """The consumer group's generation this member last joined (-1: none yet)."""
        return int(self._consumer._coordinator._generation.generation_id)

    def partition_count(self) -> int | None:
        """How many partitions the topic has (None: not known yet)."""
        partitions = self._consumer.partitions_for_topic(self.topic)
        return len(partitions) if partitions else None

    def commit(self, positions: dict[int, int]) -> tuple[dict[int, int], CommitOutcome]:
        """Commit the next offsets of the partitions this member owns (others are not its to
        commit); return those and what became of the commit."""
        owned = {tp.partition for tp in self._consumer.assignment()}
        ours = {p: o for p, o in positions.items() if p in owned}
        if not ours:
            return ours, CommitOutcome.ACKED
        try:
            self._consumer.commit(self._offsets(ours))  # within COMMIT_TIMEOUT or the stop bound
        except KafkaError as error:  # e.g. a rebalance in progress: the next checkpoint retries
            return ours, _failed_commit(error)
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
        """Leave the group within what is left of the stop bound: with a LeaveGroup when the
        group is steady, else by closing and letting the rebalance under way drop this member
        (:func:`~stream_miner.connectors.kafka_join_fix.depart`). The loop's last checkpoint
        and commit are done, so the rebalance listener hands nothing over on close; a line
        says when the last commit failed."""
        self.handover = None
        if self._consumer.commit_failure is not None:
            print(
                f"stream-miner: offsets not committed to Kafka at {self.servers} "
                f"({self._consumer.commit_failure}); the checkpoint holds them",
                file=self._log,
            )
        depart(self._consumer, self._stop.budget(CLOSE_TIMEOUT))
        try:
            self._consumer.close(autocommit=False, timeout_ms=int(self._stop.budget(CLOSE_TIMEOUT) * 1000))
        except KafkaError as error:
            print(f"stream-miner: warning: closing the Kafka consumer: {describe(error)}", file=self._log)


def _offset(committed: OffsetAndMetadata | int | None) -> int | None:
    """A committed offset as an int; None when nothing is committed."""
    offset = committed.offset if isinstance(committed, OffsetAndMetadata) else committed
    return offset if offset is not None and offset >= 0 else None


def _failed_commit(error: KafkaError) -> CommitOutcome:
    """What a commit that raised ``error`` came to (a refusal, or no answer), said in a line."""
    outcome = CommitOutcome.REFUSED if isinstance(error, REFUSALS) else CommitOutcome.UNKNOWN
    how = "refused" if outcome is CommitOutcome.REFUSED else "unanswered"
    print(
        f"stream-miner: warning: offset commit {how} ({type(error).__name__}); "
        "the next checkpoint commits again",
        file=sys.stderr,
        flush=True,
    )
    return outcome
