"""Kafka source addresses and pass-through client options."""

from __future__ import annotations

import pytest

pytest.importorskip("kafka", reason="kafka-python is not installed (the Kafka source needs it)")

from stream_miner.connectors.kafka_source import client_options, parse_kafka_url
from stream_miner.decoding.files import InputError


def test_kafka_urls():
    assert parse_kafka_url("kafka://a:9092,b:9092/checkouts") == ("a:9092,b:9092", "checkouts")
    for bad in ("kafka://a:9092", "kafka:///topic", "kafka://a:1/t/x"):
        with pytest.raises(InputError, match="kafka://HOST:PORT/TOPIC"):
            parse_kafka_url(bad)


def test_options_are_typed_and_secrets_come_from_the_environment(monkeypatch):
    monkeypatch.setenv("CHECKOUT_PASSWORD", "s3cret=x")
    options = client_options(
        [
            "max_poll_records=50",
            "check_crcs=false",
            "security_protocol=SASL_SSL",
            "sasl_plain_password=env:CHECKOUT_PASSWORD",
            "session.timeout.ms=6000",
        ]
    )
    assert options == {
        "max_poll_records": 50,
        "check_crcs": False,
        "security_protocol": "SASL_SSL",
        "sasl_plain_password": "s3cret=x",
        "session_timeout_ms": 6000,
    }


def test_bad_options_are_refused_without_echoing_values(monkeypatch):
    monkeypatch.delenv("NOT_SET_ANYWHERE", raising=False)
    with pytest.raises(InputError, match="NOT_SET_ANYWHERE is not set"):
        client_options(["sasl_plain_password=env:NOT_SET_ANYWHERE"])
    with pytest.raises(InputError, match="not a kafka-python client option"):
        client_options(["bootstrap_serverz=x"])
    with pytest.raises(InputError) as refused:
        client_options(["sasl_plain_password"])
    assert "key=value" in str(refused.value)
