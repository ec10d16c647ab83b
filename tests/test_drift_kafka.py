"""Drift events from a Kafka topic to a Kafka topic, against a real broker: the same events
as a file replay of the same baskets, and after SIGKILL and restart every event is in the
events topic (by id) and no event differs from the uninterrupted run's."""

from __future__ import annotations

import json
import subprocess

import pytest

from kafka_broker import GROUP_OPTIONS
from processes import stream_miner, wait_until
from stream_miner.simulate.planted import Plant, baskets

pytestmark = pytest.mark.kafka

N = 6000
SETTINGS = ["--window-size", "1000", "--tick-every", "100", "--min-support", "0.05"]
SETTINGS += ["--min-confidence", "0.5", "--min-lift", "1.5"]
PLANTS = [Plant(("new-a", "new-b"), 0.12, start=2500), Plant(("old-x", "old-y"), 0.12, end=4000)]


def stream() -> list[dict]:
    return [{"id": f"b{i}", "items": items} for i, items in enumerate(baskets(N, PLANTS, seed=11))]


def file_events(tmp_path, rows) -> list[dict]:
    """The events of a file replay of ``rows`` (the reference)."""
    path = tmp_path / "baskets.jsonl"
    path.write_text("".join(json.dumps(r) + "\n" for r in rows))
    out = tmp_path / "file-events.jsonl"
    command = stream_miner("run", "--source", f"file:{path}", *SETTINGS, "--events-out", str(out), "--quiet")
    subprocess.run(command, check=True, capture_output=True, timeout=120)
    return [json.loads(line) for line in out.read_text().splitlines()]


def kafka_run(spawn, broker, topic, workdir):
    command = stream_miner(
        "run",
        "--source",
        f"kafka://{broker.address}/{topic}",
        "--group",
        f"g-{topic}",
        *SETTINGS,
        "--checkpoint-dir",
        str(workdir / "ck"),
        "--checkpoint-interval",
        "0.2s",
        "--snapshot-out",
        str(workdir / "snap.jsonl"),
        "--events-out",
        f"kafka://{broker.address}/{topic}-drift",
    )
    for option in GROUP_OPTIONS:
        command += ["--kafka-option", option]
    workdir.mkdir(exist_ok=True)
    run = spawn(command)
    run.wait_ready()
    return run


def consumed(workdir) -> int:
    path = workdir / "snap.jsonl"
    if not path.exists():
        return 0
    return json.loads(path.read_text().splitlines()[0])["consumed"]


def topic_events(broker, topic) -> list[dict]:
    messages = broker.read_topic(f"{topic}-drift")
    for message in messages:
        assert message.key.decode() == json.loads(message.value)["id"]
    return [json.loads(m.value) for m in messages]


def test_events_go_to_a_topic_and_match_a_file_replay(broker, spawn, tmp_path):
    rows = stream()
    expected = file_events(tmp_path, rows)
    assert {tuple(e["items"]): e["event"] for e in expected} == {
        ("new-a", "new-b"): "emerged",
        ("old-x", "old-y"): "faded",
    }
    broker.create_topic("steady", 1)
    broker.create_topic("steady-drift", 1)
    broker.produce("steady", rows)
    run = kafka_run(spawn, broker, "steady", tmp_path / "k")
    wait_until(lambda: consumed(tmp_path / "k") == N, 120, "every basket consumed", run)
    run.stop()
    assert topic_events(broker, "steady") == expected


def test_sigkill_and_restart_lose_no_event(broker, spawn, tmp_path):
    rows = stream()
    expected = {e["id"]: e for e in file_events(tmp_path, rows)}
    broker.create_topic("crashy", 1)
    broker.create_topic("crashy-drift", 1)
    broker.produce("crashy", rows[:3000])
    workdir = tmp_path / "k"
    run = kafka_run(spawn, broker, "crashy", workdir)
    wait_until(lambda: consumed(workdir) >= 2800, 120, "the emergence consumed", run)
    run.kill()
    broker.produce("crashy", rows[3000:])
    run = kafka_run(spawn, broker, "crashy", workdir)
    wait_until(lambda: consumed(workdir) == N, 120, "every basket consumed", run)
    run.stop()
    got = topic_events(broker, "crashy")
    assert {e["id"] for e in got} == set(expected)
    for event in got:  # a repeat (a kill between a send and its note) is the same event
        assert event == expected[event["id"]]
