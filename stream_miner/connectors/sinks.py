"""Records leaving stream-miner for a Kafka topic: dead letters and drift events.

Both produce with ``acks="all"`` and ``enable_idempotence=True`` set explicitly, so a retried
send is not written twice. :class:`KafkaEvents` sends each drift event's JSON keyed by its
id. :class:`KafkaDeadLetters` puts a bad record's raw bytes
on a dead-letter topic unchanged, keyed by the record's deterministic id
(``SOURCE/PARTITION/OFFSET``), with the reason and origin in message headers; it keeps
each record until the broker confirmed it and sends again what failed (a broker stopped,
killed or restarted), so ``flush`` returns only once all are in the topic, or once a stop's
time bound is spent (a line then says how many were not sent).
"""

from __future__ import annotations

import json
import os
import sys
import threading
from collections import Counter
from typing import Any, TextIO

from kafka import KafkaProducer
from kafka.errors import KafkaTimeoutError, RetriableError, UnknownProducerIdError
from kafka.producer.future import FutureRecordMetadata

from stream_miner.connectors.kafka_source import CLOSE_TIMEOUT, Retry, connect, describe, parse_kafka_url
from stream_miner.decoding.records import DeadLetter
from stream_miner.runtime.protocols import CannotCutBack
from stream_miner.runtime.stop_clock import StopClock

SAFE_PRODUCER = {"acks": "all", "enable_idempotence": True}
# A dead letter's send waits at most this long for metadata or buffer space (kafka-python's
# default is 60 s); one that could not be handed to the client is sent again by flush().
DEAD_LETTER_DEFAULTS: dict[str, object] = {"max_block_ms": 5000}
FLUSH_STEP = 5.0  # seconds one attempt to deliver the dead letters waits for the broker
# failures after which sending the same record again can succeed (a restarted broker forgets
# the idempotent producer's id)
RESEND_AFTER = (RetriableError, UnknownProducerIdError)


def safe_producer(
    url: str,
    options: dict[str, object] | None,
    stop: threading.Event | None = None,
    defaults: dict[str, object] | None = None,
) -> tuple[KafkaProducer, str]:
    """A producer for ``url``; of the shared client options it takes those a producer knows
    (over ``defaults``). Until the brokers answer, a line per attempt says why not (``stop``
    ends the wait)."""
    servers, topic = parse_kafka_url(url)
    known = {k: v for k, v in (options or {}).items() if k in KafkaProducer.DEFAULT_CONFIG}
    settings = (defaults or {}) | known | SAFE_PRODUCER
    make = lambda: KafkaProducer(bootstrap_servers=servers, **settings)  # noqa: E731
    return connect(servers, make, stop or threading.Event(), sys.stderr), topic


class _ConfirmedSends(CannotCutBack):
    """Records to a Kafka topic, each kept until the broker confirmed it and sent again when a
    send failed in a way that a retry can mend; subclasses say how an item becomes a record."""

    what = "records"

    def __init__(
        self,
        url: str,
        options: dict[str, object] | None = None,
        *,
        stop: StopClock | None = None,
        log: TextIO = sys.stderr,
    ) -> None:
        self._stop = stop or StopClock()
        self._producer, self.topic = safe_producer(url, options, self._stop, DEAD_LETTER_DEFAULTS)
        self.servers = parse_kafka_url(url)[0]
        self._log = log
        self._retry = Retry(f"sending {self.what} to topic {self.topic}", self.servers, log)
        self._unconfirmed: list[tuple[Any, FutureRecordMetadata | None]] = []
        self._reported = 0  # how many were last reported as not sent

    def _record(self, item: Any) -> tuple[bytes, bytes, list[tuple[str, bytes]]]:
        """The key, value and headers of ``item``'s message."""
        raise NotImplementedError

    def _name(self, item: Any) -> str:
        """``item`` in a warning line."""
        raise NotImplementedError

    def _enqueue(self, item: Any) -> None:
        self._unconfirmed.append((item, self._send(item)))

    def _send(self, item: Any) -> FutureRecordMetadata | None:
        key, value, headers = self._record(item)
        try:
            return self._producer.send(self.topic, key=key, value=value, headers=headers)
        except KafkaTimeoutError:  # no metadata or buffer space in time: flush() sends it again
            return None

    def flush(self) -> None:
        """Return once every record written so far is in the topic; between attempts a line
        says what failed and the pause grows. Once a stop was asked for, only until its
        bound: then a line says how many were not sent."""
        while (problem := self._deliver()) is not None:
            if self._stop.spent():
                if len(self._unconfirmed) != self._reported:
                    self._reported = len(self._unconfirmed)
                    print(
                        f"stream-miner: {self._reported} {self.what} not sent to topic {self.topic} "
                        f"at {self.servers} ({problem}): the stop's time bound is spent",
                        file=self._log,
                    )
                return
            self._stop.wait(self._retry.failed(problem))
        self._retry.succeeded()

    def _deliver(self) -> str | None:
        """One attempt: send again what failed, wait for the rest; None once all are in the
        topic, else what went wrong."""
        waiting = []
        for item, future in self._unconfirmed:
            if future is None or future.failed():
                if future is not None and not isinstance(future.exception, RESEND_AFTER):
                    print(
                        f"stream-miner: warning: {self._name(item)} not sent to topic {self.topic} "
                        f"({describe(future.exception)}); dropped",
                        file=self._log,
                    )
                    continue
                future = self._send(item)
            waiting.append((item, future))
        try:
            self._producer.flush(timeout=self._stop.budget(FLUSH_STEP))
        except KafkaTimeoutError as error:
            problem: str | None = describe(error)
        else:
            problem = None
        self._unconfirmed = [(item, f) for item, f in waiting if f is None or not f.succeeded()]
        if not self._unconfirmed:
            return None
        failure = next((f.exception for _, f in self._unconfirmed if f is not None and f.failed()), None)
        return problem or (describe(failure) if failure is not None else "not handed to the client")

    def close(self) -> None:
        """Deliver what is left (see :meth:`flush`), then close within the stop bound."""
        self.flush()
        self._producer.close(timeout=self._stop.budget(CLOSE_TIMEOUT))


class KafkaDeadLetters(_ConfirmedSends):
    """Dead letters to a Kafka topic: the raw bytes as the value; reason, detail and origin
    as headers; counted by reason like the file sink."""

    what = "dead letters"

    def __init__(self, url: str, options: dict[str, object] | None = None, **kwargs: Any) -> None:
        super().__init__(url, options, **kwargs)
        self.counts: Counter[str] = Counter()

    def write(self, letter: DeadLetter) -> None:
        self.counts[letter.reason] += 1
        self._enqueue(letter)

    def _record(self, letter: DeadLetter) -> tuple[bytes, bytes, list[tuple[str, bytes]]]:
        headers = [
            ("reason", letter.reason.encode()),
            ("detail", letter.detail.encode()),
            ("source", letter.source.encode()),
            ("partition", str(letter.partition).encode()),
            ("offset", str(letter.offset).encode()),
        ]
        return letter.key.encode(), letter.raw, headers

    def _name(self, letter: DeadLetter) -> str:
        return f"dead letter from {letter.source} partition {letter.partition} offset {letter.offset}"


class KafkaEvents(_ConfirmedSends):
    """Drift events to a Kafka topic: the event's JSON as the value, its id as the key (so a
    compacted topic or a reader can drop a repeat) and its kind as a header."""

    what = "drift events"

    def write(self, event: dict) -> None:
        self._enqueue(event)

    def _record(self, event: dict) -> tuple[bytes, bytes, list[tuple[str, bytes]]]:
        value = json.dumps(event, ensure_ascii=False, allow_nan=False).encode()
        return str(event["id"]).encode(), value, [("event", str(event["event"]).encode())]

    def _name(self, event: dict) -> str:
        return f"event {event['id']}"
