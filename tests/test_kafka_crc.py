"""kafka-python checks the CRC-32C of every record batch; without the ``crc32c`` C module it does
so in pure Python, about 2.5x slower to consume (docs/performance.md). The module is a
dependency (kafka-python's ``crc32c`` extra); a member that runs without it says so once."""

from __future__ import annotations

import io

import pytest
from kafka.record import util

from kafka_broker import GROUP_OPTIONS
from stream_miner.connectors.kafka_source import SLOW_CRC, KafkaSource, client_options, native_crc
from stream_miner.decoding.messages import MessageFormat

pytestmark = pytest.mark.kafka


def started_member_log(broker, topic: str) -> str:
    """What a KafkaSource prints while it starts and stops."""
    log = io.StringIO()
    options = client_options(GROUP_OPTIONS)
    source = KafkaSource(f"kafka://{broker.address}/{topic}", f"g-{topic}", MessageFormat(), options, log=log)
    source.close()
    return log.getvalue()


def test_the_installed_client_checks_crcs_in_c_and_says_nothing(broker):
    assert native_crc()
    assert "crc32c" not in started_member_log(broker, "crc-native")


def test_a_member_without_the_c_module_says_so_in_one_line(broker, monkeypatch):
    monkeypatch.setattr(util, "crc32c_c", None)
    assert not native_crc()
    lines = [line for line in started_member_log(broker, "crc-python").splitlines() if "crc32c" in line]
    assert lines == [SLOW_CRC]
    assert SLOW_CRC.startswith("stream-miner: warning: ") and "pip install crc32c" in SLOW_CRC
