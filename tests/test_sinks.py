"""Output sinks: JSON Lines file and stdout, and a Kafka topic on a real broker."""

from __future__ import annotations

import io
import json

import pytest

pytest.importorskip("kafka", reason="kafka-python is not installed (stream_miner.connectors.sinks needs it)")

from kafka_broker import start_broker, stop_broker
from stream_miner.connectors.sinks import JsonlSink, KafkaSink, StdoutSink

RECORDS = [{"type": "event", "items": ["scone", "tea"], "n": 3}, {"type": "event", "items": ["jam"], "n": 1}]


def test_jsonl_sink_appends_one_record_per_line(tmp_path):
    path = tmp_path / "events.jsonl"
    path.write_text('{"earlier": true}\n')
    sink = JsonlSink(path)
    for record in RECORDS:
        sink.write(record)
    sink.close()
    assert [json.loads(line) for line in path.read_text().splitlines()] == [{"earlier": True}, *RECORDS]


def test_stdout_sink_writes_json_lines():
    out = io.StringIO()
    sink = StdoutSink(out)
    for record in RECORDS:
        sink.write(record)
    sink.close()
    assert [json.loads(line) for line in out.getvalue().splitlines()] == RECORDS


@pytest.mark.kafka
def test_kafka_sink_produces_json_records_to_a_topic():
    broker = start_broker()
    try:
        broker.create_topic("events", 1)
        sink = KafkaSink(f"kafka://{broker.address}/events")
        assert sink._producer.config["acks"] == -1 and sink._producer.config["enable_idempotence"]
        for record in RECORDS:
            sink.write(record)
        sink.close()
        assert [json.loads(m.value) for m in broker.read_topic("events")] == RECORDS
    finally:
        stop_broker(broker)
