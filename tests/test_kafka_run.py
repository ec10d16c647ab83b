"""`stream-miner run` against a real Kafka-protocol broker (started per module): several
partitions, bad messages, SIGKILL and restart, two consumers in one group, a paused broker."""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import threading
import time
from collections import Counter

import fim
import pytest

from brute_force import frequent_itemsets
from kafka_broker import GROUP_OPTIONS, start_broker, stop_broker


@pytest.fixture(scope="module")
def broker():
    running = start_broker()
    yield running
    stop_broker(running)


def checkouts(n, seed=0, prefix="k"):
    import random

    rnd = random.Random(seed)
    goods = [f"g{i}" for i in range(10)]
    return [
        {
            "id": f"{prefix}{i}",
            "items": sorted(
                set(rnd.sample(goods[:4], rnd.randint(1, 3)) + rnd.sample(goods, rnd.randint(0, 2)))
            ),
        }
        for i in range(n)
    ]


def start_run(broker, topic, group, workdir, *extra):
    command = [
        sys.executable,
        "-m",
        "stream_miner",
        "run",
        "--source",
        f"kafka://{broker.address}/{topic}",
        "--group",
        group,
        "--min-count",
        "1",
        "--checkpoint-dir",
        str(workdir / "ck"),
        "--checkpoint-interval",
        "0.2s",
        "--snapshot-out",
        str(workdir / "snap.jsonl"),
        *extra,
    ]
    for option in GROUP_OPTIONS:
        command += ["--kafka-option", option]
    workdir.mkdir(exist_ok=True)
    return subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)


def snapshot(workdir):
    path = workdir / "snap.jsonl"
    if not path.exists():
        return None, {}
    lines = [json.loads(line) for line in path.read_text().splitlines()]
    return lines[0], {tuple(r["items"]): r["count"] for r in lines[1:] if r["type"] == "itemset"}


def wait_for(condition, seconds=60):
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        if condition():
            return True
        time.sleep(0.1)
    return False


def consumed(workdir):
    header, _ = snapshot(workdir)
    return 0 if header is None else header["consumed"]


def stop(process):
    process.send_signal(signal.SIGTERM)
    _, err = process.communicate(timeout=30)
    assert process.returncode == 0, err
    return err


def test_several_partitions_and_bad_messages(broker, tmp_path):
    broker.create_topic("multi", 3)
    baskets = checkouts(600, seed=1)
    bad = [b"not json", b'{"items": "tea"}']
    broker.produce("multi", [*baskets, *bad], partition_of=lambda n: n % 3)
    run = start_run(
        broker,
        "multi",
        "g-multi",
        tmp_path,
        "--window-size",
        "5000",
        "--tick-every",
        "25",
        "--dead-letter-out",
        str(tmp_path / "dead.jsonl"),
    )
    assert wait_for(
        lambda: (
            consumed(tmp_path) == 600
            and (tmp_path / "dead.jsonl").exists()
            and len((tmp_path / "dead.jsonl").read_text().splitlines()) == 2
        )
    )
    time.sleep(0.5)
    err = stop(run)
    header, itemsets = snapshot(tmp_path)
    assert header["consumed"] == 600
    assert itemsets == {
        tuple(sorted(k)): v for k, v in frequent_itemsets([b["items"] for b in baskets], 1).items()
    }
    letters = [json.loads(line) for line in (tmp_path / "dead.jsonl").read_text().splitlines()]
    assert sorted(letter["reason"] for letter in letters) == ["invalid JSON", "items not a list"]
    assert {(letter["partition"], letter["source"]) for letter in letters} == {
        (0, "kafka:multi"),
        (1, "kafka:multi"),
    }
    assert "dead letters: invalid JSON 1, items not a list 1" in err


def test_sigkill_mid_stream_then_restart_equals_an_uninterrupted_run(broker, tmp_path):
    broker.create_topic("crash", 1)
    baskets = checkouts(4000, seed=2, prefix="c")
    producer = threading.Thread(
        target=lambda: [
            broker.produce("crash", baskets[i : i + 200])
            for i in range(0, 4000, 200)
            if time.sleep(0.1) is None
        ]
    )
    producer.start()
    window = ["--window-size", "700", "--tick-every", "20", "--kafka-option", "max_poll_records=50"]
    victim = start_run(broker, "crash", "g-crash", tmp_path, *window)
    assert wait_for(lambda: consumed(tmp_path) > 300, seconds=60)
    victim.send_signal(signal.SIGKILL)
    victim.wait()
    killed_at = consumed(tmp_path)
    producer.join()
    assert killed_at < 4000
    restarted = start_run(broker, "crash", "g-crash", tmp_path, *window)
    assert wait_for(lambda: consumed(tmp_path) == 4000, seconds=90)
    time.sleep(0.5)
    err = stop(restarted)
    assert "resumed from" in err
    header, itemsets = snapshot(tmp_path)
    assert header["consumed"] == 4000 and header["last_id"] == "c3999" and header["size"] == 700
    expected = frequent_itemsets([b["items"] for b in baskets[-700:]], 1)
    assert itemsets == {tuple(sorted(k)): v for k, v in expected.items()}
    reference = fim.fpgrowth([b["items"] for b in baskets[-700:]], supp=-1, report="a")  # pyfim
    assert itemsets == {tuple(sorted(k)): v for k, v in reference}


def test_two_consumers_in_one_group_lose_and_double_count_nothing(broker, tmp_path):
    broker.create_topic("shared", 4)
    first, second = checkouts(400, seed=3, prefix="a"), checkouts(400, seed=4, prefix="b")
    one, two = tmp_path / "one", tmp_path / "two"
    settings = ["--window-size", "5000", "--tick-interval", "0.2s"]
    run_one = start_run(broker, "shared", "g-shared", one, *settings)
    broker.produce("shared", first, partition_of=lambda n: n % 4)
    assert wait_for(lambda: consumed(one) == 400)
    run_two = start_run(broker, "shared", "g-shared", two, *settings)
    time.sleep(8)  # the second member joins: a rebalance moves partitions to it
    broker.produce("shared", second, partition_of=lambda n: n % 4)
    assert wait_for(lambda: consumed(one) + consumed(two) == 800, seconds=90)
    time.sleep(1)
    stop(run_one)
    stop(run_two)
    assert consumed(one) + consumed(two) == 800 and consumed(two) > 0
    totals = Counter()
    for workdir in (one, two):
        totals.update({k: v for k, v in snapshot(workdir)[1].items() if len(k) == 1})
    expected = Counter(item for b in first + second for item in b["items"])
    assert totals == {(item,): n for item, n in expected.items()}


def test_a_broker_paused_for_15_seconds_loses_nothing(broker, tmp_path):
    broker.create_topic("paused", 2)
    baskets = checkouts(1000, seed=5, prefix="p")
    broker.produce("paused", baskets[:500], partition_of=lambda n: n % 2)
    run = start_run(broker, "paused", "g-paused", tmp_path, "--window-size", "5000", "--tick-every", "10")
    assert wait_for(lambda: consumed(tmp_path) == 500)
    broker.pause()
    time.sleep(15)
    broker.resume()
    broker.produce("paused", baskets[500:], partition_of=lambda n: n % 2)
    assert wait_for(lambda: consumed(tmp_path) == 1000, seconds=90)
    stop(run)
    _, itemsets = snapshot(tmp_path)
    expected = frequent_itemsets([b["items"] for b in baskets], 1)
    assert itemsets == {tuple(sorted(k)): v for k, v in expected.items()}


def test_dead_letters_to_a_kafka_topic_keep_raw_bytes_and_reasons(broker, tmp_path):
    from kafka import KafkaConsumer

    broker.create_topic("with-bad", 1)
    broker.create_topic("dead", 1)
    bad = [b"\xff\xfe not utf-8", b'{"items": [1, 2]}']
    broker.produce("with-bad", [*checkouts(50, seed=6), *bad])
    run = start_run(
        broker,
        "with-bad",
        "g-dead",
        tmp_path,
        "--window-size",
        "100",
        "--tick-every",
        "10",
        "--dead-letter-out",
        f"kafka://{broker.address}/dead",
    )
    assert wait_for(lambda: consumed(tmp_path) == 50)
    time.sleep(1)
    stop(run)
    reader = KafkaConsumer(
        "dead", bootstrap_servers=broker.address, auto_offset_reset="earliest", consumer_timeout_ms=5000
    )
    letters = [(m.value, dict(m.headers)) for m in reader]
    reader.close()
    assert [value for value, _ in letters] == bad
    assert [headers["reason"] for _, headers in letters] == [b"invalid UTF-8", b"bad item"]
    assert [headers["offset"] for _, headers in letters] == [b"50", b"51"]
    assert all(headers["source"] == b"kafka:with-bad" for _, headers in letters)


def test_a_tick_longer_than_max_poll_interval_keeps_the_group_membership(broker, tmp_path):
    from simulations.quest import quest_baskets

    broker.create_topic("slow", 1)
    first = [
        {"id": f"s{i}", "items": [str(x) for x in b]} for i, b in enumerate(quest_baskets(60000, seed=9))
    ]
    broker.produce("slow", first)
    command = [
        sys.executable,
        "-m",
        "stream_miner",
        "run",
        "--source",
        f"kafka://{broker.address}/slow",
        "--group",
        "g-slow",
        "--window-size",
        "60000",
        "--tick-every",
        "60000",
        "--min-count",
        "60",
        "--snapshot-out",
        str(tmp_path / "snap.jsonl"),
        "--kafka-option",
        "max_poll_interval_ms=1000",
        "--kafka-option",
        "session_timeout_ms=6000",
        "--kafka-option",
        "heartbeat_interval_ms=300",
    ]
    run = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    assert wait_for(lambda: consumed(tmp_path) == 60000, seconds=120)  # after a first tick of seconds
    later = [{"id": f"t{i}", "items": ["late-comer"]} for i in range(60)]
    broker.produce("slow", later)
    time.sleep(3)
    run.send_signal(signal.SIGTERM)
    _, err = run.communicate(timeout=60)
    assert run.returncode == 0, err
    header, itemsets = snapshot(tmp_path)
    assert header["consumed"] == 60060  # nothing read twice after a lost membership
    assert itemsets[("late-comer",)] == 60
    assert "warning" not in err
