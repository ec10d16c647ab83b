"""Where records leave stream-miner: a Kafka topic, a JSON Lines file, or stdout.

Every sink takes JSON-ready dicts (``write``), flushes what it buffers (``flush``) and closes.
The Kafka sink produces with ``acks="all"`` and ``enable_idempotence=True`` set explicitly, so
a retried send is not written twice. :class:`KafkaDeadLetters` puts a bad record's raw bytes
on a dead-letter topic unchanged, keyed by the record's deterministic id
(``SOURCE/PARTITION/OFFSET``), with the reason and origin in message headers.
"""

from __future__ import annotations

import json
import os
import sys
import threading
from collections import Counter
from typing import TextIO

from kafka import KafkaProducer

from stream_miner.connectors.kafka_source import connect, parse_kafka_url
from stream_miner.decoding.records import DeadLetter

SAFE_PRODUCER = {"acks": "all", "enable_idempotence": True}


def _producer(
    url: str, options: dict[str, object] | None, stop: threading.Event | None = None
) -> tuple[KafkaProducer, str]:
    """A producer for ``url``; of the shared client options it takes those a producer knows.
    Until the brokers answer, a line per attempt says why not (``stop`` ends the wait)."""
    servers, topic = parse_kafka_url(url)
    known = {k: v for k, v in (options or {}).items() if k in KafkaProducer.DEFAULT_CONFIG}
    make = lambda: KafkaProducer(bootstrap_servers=servers, **(known | SAFE_PRODUCER))  # noqa: E731
    return connect(servers, make, stop or threading.Event(), sys.stderr), topic


class KafkaSink:
    """JSON records to a Kafka topic (``kafka://HOST:PORT/TOPIC``)."""

    def __init__(self, url: str, options: dict[str, object] | None = None) -> None:
        self._producer, self.topic = _producer(url, options)

    def write(self, record: dict) -> None:
        self._producer.send(self.topic, value=json.dumps(record, ensure_ascii=False).encode())

    def flush(self) -> None:
        self._producer.flush()

    def close(self) -> None:
        self._producer.flush()
        self._producer.close()


class JsonlSink:
    """JSON records appended to a file, one per line, flushed per record."""

    def __init__(self, path: str | os.PathLike) -> None:
        self._out: TextIO = open(path, "a", encoding="utf-8")  # noqa: SIM115

    def write(self, record: dict) -> None:
        self._out.write(json.dumps(record, ensure_ascii=False) + "\n")
        self._out.flush()

    def flush(self) -> None:
        self._out.flush()

    def close(self) -> None:
        self._out.close()


class StdoutSink(JsonlSink):
    """JSON records on standard output."""

    def __init__(self, out: TextIO | None = None) -> None:
        self._out = out or sys.stdout

    def close(self) -> None:
        self._out.flush()


class KafkaDeadLetters:
    """Dead letters to a Kafka topic: the raw bytes as the value; reason, detail and origin
    as headers; counted by reason like the file sink."""

    def __init__(
        self, url: str, options: dict[str, object] | None = None, *, stop: threading.Event | None = None
    ) -> None:
        self._producer, self.topic = _producer(url, options, stop)
        self.counts: Counter[str] = Counter()

    def write(self, letter: DeadLetter) -> None:
        headers = [
            ("reason", letter.reason.encode()),
            ("detail", letter.detail.encode()),
            ("source", letter.source.encode()),
            ("partition", str(letter.partition).encode()),
            ("offset", str(letter.offset).encode()),
        ]
        self._producer.send(self.topic, key=letter.key.encode(), value=letter.raw, headers=headers)
        self.counts[letter.reason] += 1

    def flush(self) -> None:
        self._producer.flush()

    def position(self) -> int | None:
        """A topic cannot be cut back."""
        return None

    def truncate(self, position: int | None) -> None:
        """A topic cannot be cut back: nothing to do."""

    def close(self) -> None:
        self._producer.flush()
        self._producer.close()
