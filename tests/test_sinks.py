"""Event sinks: a JSON Lines file that can be cut back, stdout, and a Kafka topic on a real
broker."""

from __future__ import annotations

import io
import json

import pytest

from stream_miner.cli.event_lines import EventLines, describe_event
from stream_miner.connectors.json_lines import JsonLinesFile

EVENT = {
    "event": "emerged",
    "id": "emerged-7-0123456789ab",
    "tick": 7,
    "items": ["jam", "scone"],
    "rules": [
        {"antecedent": ["scone"], "consequent": ["jam"], "support": 0.1, "confidence": 0.8, "lift": 2.5}
    ],
    "support": 0.1,
    "count": 20,
    "baseline": {"support": 0.02, "confidence": 0.3, "lift": 1.1, "count": 4, "size": 200, "exact": True},
    "p_value": 0.0001,
    "window": {"size": 200, "first_id": "b1", "last_id": "b200", "end_time": None},
}
LATER = {**EVENT, "id": "faded-9-0123456789ab", "event": "faded", "tick": 9}


def test_json_lines_file_appends_knows_its_length_and_is_cut_back(tmp_path):
    path = tmp_path / "events.jsonl"
    path.write_text('{"earlier": true}\n')
    sink = JsonLinesFile(path)
    start = sink.position()
    sink.write(EVENT)
    sink.flush()
    middle = sink.position()
    sink.write(LATER)
    assert start == len('{"earlier": true}\n') and middle is not None and sink.position() > middle
    sink.truncate(middle)
    sink.close()
    assert [json.loads(line) for line in path.read_text().splitlines()] == [{"earlier": True}, EVENT]


def test_json_lines_file_is_never_lengthened_by_a_cut(tmp_path, capsys):
    path = tmp_path / "events.jsonl"
    sink = JsonLinesFile(path)
    sink.write(EVENT)
    size = sink.position()
    assert size is not None
    sink.truncate(size + 100)  # the file was cut outside stream-miner: left alone, with a warning
    sink.close()
    assert path.stat().st_size == size
    assert "shorter than the checkpoint says" in capsys.readouterr().err


def test_json_lines_to_a_device_is_neither_synced_nor_cut():
    sink = JsonLinesFile("/dev/null")
    sink.write(EVENT)
    sink.flush()  # fsync would fail on a device
    assert sink.position() is None
    sink.truncate(None)
    sink.close()


def test_stdout_events_as_json_or_as_readable_lines():
    out = io.StringIO()
    EventLines(out).write(EVENT)
    assert json.loads(out.getvalue()) == EVENT
    text = io.StringIO()
    EventLines(text, as_text=True).write(EVENT)
    assert text.getvalue() == describe_event(EVENT) + "\n"
    assert text.getvalue().startswith("emerged  jam + scone  support 10.0% (baseline 2.0%)")
    assert "confidence 0.80, lift 2.50, p 0.0001, tick 7" in text.getvalue()


@pytest.mark.kafka
def test_kafka_events_are_keyed_by_id_with_their_kind_as_a_header():
    pytest.importorskip("kafka", reason="kafka-python is not installed")
    from kafka_broker import start_broker, stop_broker
    from stream_miner.connectors.sinks import KafkaEvents

    broker = start_broker()
    try:
        broker.create_topic("drift", 1)
        sink = KafkaEvents(f"kafka://{broker.address}/drift")
        assert sink._producer.config["acks"] == -1 and sink._producer.config["enable_idempotence"]
        sink.write(EVENT)
        sink.write(LATER)
        sink.close()
        messages = broker.read_topic("drift")
        assert [json.loads(m.value) for m in messages] == [EVENT, LATER]
        assert [m.key.decode() for m in messages] == [EVENT["id"], LATER["id"]]
        assert [dict(m.headers)["event"] for m in messages] == [b"emerged", b"faded"]
    finally:
        stop_broker(broker)
