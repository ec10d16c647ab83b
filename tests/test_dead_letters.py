"""Dead-letter sinks: ``stream_miner.connectors.dead_letters``."""

from __future__ import annotations

import base64
import json
from collections import Counter

from stream_miner.connectors.dead_letters import RAW_TEXT_LIMIT, DeadLetterCounter, DeadLetterFile
from stream_miner.decoding.messages import MessageFormat, decode_message
from stream_miner.decoding.records import DeadLetter


def letter(raw: bytes = b"\xff{oops", reason: str = "invalid UTF-8", **origin) -> DeadLetter:
    where = {"source": "orders", "partition": 3, "offset": 17} | origin
    return DeadLetter(raw=raw, reason=reason, detail="why", **where)


def lines(path) -> list[dict]:
    return [json.loads(line) for line in path.read_text(encoding="utf-8").splitlines()]


def test_file_record_round_trip(tmp_path):
    path = tmp_path / "dead.jsonl"
    raw = b'{"items": ["caf\xc3\xa9"], "ts": "x"}\xff\x00'
    with DeadLetterFile(path) as sink:
        sink.write(letter(raw, "bad event time"))
    [record] = lines(path)
    assert base64.b64decode(record.pop("raw_base64")) == raw
    assert record == {
        "key": "orders/3/17",
        "reason": "bad event time",
        "detail": "why",
        "source": "orders",
        "partition": 3,
        "offset": 17,
        "raw_text": '{"items": ["café"], "ts": "x"}\ufffd\x00',
    }


def test_file_record_from_decode_message(tmp_path):
    path = tmp_path / "dead.jsonl"
    raw = b'{"items": []}'
    found = decode_message(raw, MessageFormat(), source="stdin")
    with DeadLetterFile(path) as sink:
        sink.write(found)
    [record] = lines(path)
    assert (record["reason"], record["source"], record["partition"], record["offset"]) == (
        "empty basket",
        "stdin",
        None,
        None,
    )
    assert base64.b64decode(record["raw_base64"]) == raw


def test_raw_text_is_truncated_but_base64_is_full(tmp_path):
    path = tmp_path / "dead.jsonl"
    raw = "é".encode() * (RAW_TEXT_LIMIT + 500)
    with DeadLetterFile(path) as sink:
        sink.write(letter(raw, "message too large"))
    [record] = lines(path)
    assert record["raw_text"] == "é" * RAW_TEXT_LIMIT
    assert base64.b64decode(record["raw_base64"]) == raw


def test_file_counts_by_reason(tmp_path):
    sink = DeadLetterFile(tmp_path / "dead.jsonl")
    for reason in ["invalid JSON", "bad item", "invalid JSON"]:
        sink.write(letter(reason=reason))
    sink.close()
    assert sink.counts == Counter({"invalid JSON": 2, "bad item": 1})
    assert [r["reason"] for r in lines(tmp_path / "dead.jsonl")] == [
        "invalid JSON",
        "bad item",
        "invalid JSON",
    ]


def test_each_write_is_flushed(tmp_path):
    path = tmp_path / "dead.jsonl"
    with DeadLetterFile(path) as sink:
        sink.write(letter(offset=1))
        assert [r["offset"] for r in lines(path)] == [1]  # readable before close


def test_append_mode_keeps_earlier_lines(tmp_path):
    path = tmp_path / "dead.jsonl"
    with DeadLetterFile(path) as first:
        first.write(letter(offset=1))
    with DeadLetterFile(str(path)) as second:
        second.write(letter(offset=2))
    assert [r["offset"] for r in lines(path)] == [1, 2]
    assert second.counts == Counter({"invalid UTF-8": 1})  # counts are per sink, not per file


def test_counter_counts_without_writing(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    with DeadLetterCounter() as sink:
        sink.write(letter(reason="bad id"))
        sink.write(letter(reason="bad id"))
        sink.write(letter(reason="no items"))
    assert sink.counts == Counter({"bad id": 2, "no items": 1})
    assert list(tmp_path.iterdir()) == []


def test_file_cut_back_to_a_position_and_never_lengthened(tmp_path, capsys):
    path = tmp_path / "dead.jsonl"
    with DeadLetterFile(path) as sink:
        sink.write(letter(offset=1))
        mark = sink.position()
        sink.write(letter(offset=2))
        sink.truncate(mark)
        sink.write(letter(offset=3))
        assert [r["offset"] for r in lines(path)] == [1, 3]
        sink.truncate(10 * path.stat().st_size)
    assert [r["offset"] for r in lines(path)] == [1, 3]
    assert "shorter than the checkpoint says" in capsys.readouterr().err
