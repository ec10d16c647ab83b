"""`stream-miner run` against a real Kafka-protocol broker (started per module): several
partitions, bad messages, SIGKILL and restart, two consumers in one group, a paused broker.

Every wait is for something observable (the run's readiness line, its snapshot, a dead
letter, the group's state), under a generous deadline; the only timed pauses are the
producer's steady pace and the broker outage, which are the scenarios themselves."""

from __future__ import annotations

import json
import signal
import threading
import time
from collections import Counter

import fim
import pytest

from brute_force import frequent_itemsets
from kafka_broker import GROUP_OPTIONS
from processes import stream_miner, wait_until

pytestmark = pytest.mark.kafka

# How long the broker stays stopped (SIGSTOP): longer than session_timeout_ms and
# max_poll_interval_ms in GROUP_OPTIONS. This is the fault being tested, not a wait for
# anything: a stopped broker answers nothing and the client logs nothing meanwhile.
OUTAGE_SECONDS = 15


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


def start_run(spawn, broker, topic, group, workdir, *extra, checkpoints=True):
    """Start `stream-miner run` on ``topic`` and wait for its readiness line."""
    run = spawn(run_command(broker, topic, group, workdir, *extra, checkpoints=checkpoints))
    run.wait_ready()
    return run


def run_command(broker, topic, group, workdir, *extra, checkpoints=True):
    """The command line of `stream-miner run` on ``topic``, state (``checkpoints``) and
    snapshot in ``workdir``."""
    kept = ["--checkpoint-dir", str(workdir / "ck"), "--checkpoint-interval", "0.2s"] if checkpoints else []
    command = stream_miner(
        "run",
        "--source",
        f"kafka://{broker.address}/{topic}",
        "--group",
        group,
        "--min-count",
        "1",
        *kept,
        "--snapshot-out",
        str(workdir / "snap.jsonl"),
        *extra,
    )
    for option in GROUP_OPTIONS:
        command += ["--kafka-option", option]
    workdir.mkdir(exist_ok=True)
    return command


def snapshot(workdir):
    path = workdir / "snap.jsonl"
    if not path.exists():
        return None, {}
    lines = [json.loads(line) for line in path.read_text().splitlines()]
    return lines[0], {tuple(r["items"]): r["count"] for r in lines[1:] if r["type"] == "itemset"}


def consumed(workdir):
    header, _ = snapshot(workdir)
    return 0 if header is None else header["consumed"]


def line_count(path):
    return len(path.read_text().splitlines()) if path.exists() else 0


def produce_steadily(broker, topic, baskets, batch=200, gap=0.1):
    """Produce in batches ``gap`` s apart, so the stream flows while it is being consumed."""
    for start in range(0, len(baskets), batch):
        broker.produce(topic, baskets[start : start + batch])
        time.sleep(gap)


@pytest.mark.slow
def test_several_partitions_and_bad_messages(broker, spawn, tmp_path):
    broker.create_topic("multi", 3)
    baskets = checkouts(600, seed=1)
    bad = [b"not json", b'{"items": "tea"}']
    broker.produce("multi", [*baskets, *bad], partition_of=lambda n: n % 3)
    run = start_run(
        spawn,
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
    wait_until(
        lambda: consumed(tmp_path) == 600 and line_count(tmp_path / "dead.jsonl") == 2,
        what="600 baskets in the snapshot and 2 dead letters",
        child=run,
    )
    err = run.stop()
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


@pytest.mark.slow
def test_sigkill_mid_stream_then_restart_equals_an_uninterrupted_run(broker, spawn, tmp_path):
    broker.create_topic("crash", 1)
    baskets = checkouts(4000, seed=2, prefix="c")
    window = ["--window-size", "700", "--tick-every", "20", "--kafka-option", "max_poll_records=50"]
    victim = start_run(spawn, broker, "crash", "g-crash", tmp_path, *window)
    producer = threading.Thread(target=produce_steadily, args=(broker, "crash", baskets[:2000]))
    producer.start()
    wait_until(lambda: consumed(tmp_path) > 300, 60, "more than 300 baskets consumed", victim)
    victim.kill()
    assert victim.process.returncode == -signal.SIGKILL
    killed_at = consumed(tmp_path)
    producer.join()
    # the rest of the stream arrives while the consumer is down and after it is back
    broker.produce("crash", baskets[2000:3000])
    assert 300 < killed_at <= 2000  # killed mid-stream
    restarted = start_run(spawn, broker, "crash", "g-crash", tmp_path, *window)
    produce_steadily(broker, "crash", baskets[3000:])
    wait_until(lambda: consumed(tmp_path) == 4000, 90, "4000 baskets consumed", restarted)
    err = restarted.stop()
    assert "resumed from" in err
    header, itemsets = snapshot(tmp_path)
    assert header["consumed"] == 4000 and header["last_id"] == "c3999" and header["size"] == 700
    expected = frequent_itemsets([b["items"] for b in baskets[-700:]], 1)
    assert itemsets == {tuple(sorted(k)): v for k, v in expected.items()}
    reference = fim.fpgrowth([b["items"] for b in baskets[-700:]], supp=-1, report="a")  # pyfim
    assert itemsets == {tuple(sorted(k)): v for k, v in reference}


@pytest.mark.slow
def test_two_consumers_in_one_group_lose_and_double_count_nothing(broker, spawn, tmp_path):
    broker.create_topic("shared", 4)
    first, second = checkouts(400, seed=3, prefix="a"), checkouts(400, seed=4, prefix="b")
    one, two = tmp_path / "one", tmp_path / "two"
    settings = ["--window-size", "5000", "--tick-interval", "0.2s"]
    run_one = start_run(spawn, broker, "shared", "g-shared", one, *settings)
    broker.produce("shared", first, partition_of=lambda n: n % 4)
    wait_until(lambda: consumed(one) == 400, what="400 baskets consumed by the first member", child=run_one)
    # a new member of a group that has committed offsets says so: it starts with an empty window
    run_two = start_run(spawn, broker, "shared", "g-shared", two, *settings, "--start-fresh")
    # the second member joins: the rebalance is over (partitions shared) once the group is Stable
    broker.wait_for_stable_group("g-shared", members=2)
    broker.produce("shared", second, partition_of=lambda n: n % 4)
    wait_until(lambda: consumed(one) + consumed(two) == 800, 90, "800 baskets consumed by the two members")
    run_one.stop()
    run_two.stop()
    assert consumed(one) + consumed(two) == 800 and consumed(two) > 0
    totals = Counter()
    for workdir in (one, two):
        totals.update({k: v for k, v in snapshot(workdir)[1].items() if len(k) == 1})
    expected = Counter(item for b in first + second for item in b["items"])
    assert totals == {(item,): n for item, n in expected.items()}


@pytest.mark.slow
def test_a_member_killed_before_its_first_tick_starts_again_after_others_committed(broker, spawn, tmp_path):
    """A run that starts with an empty window checkpoints it at once: killed before its first
    tick, it starts again with the same command although the group has committed meanwhile
    (else it would refuse, as for a lost checkpoint, and a service manager would loop)."""
    broker.create_topic("early", 2)
    early, other = tmp_path / "early", tmp_path / "other"
    settings = ["--window-size", "5000", "--tick-interval", "0.2s"]
    no_tick = ["--window-size", "5000", "--tick-every", "999"]
    victim = start_run(spawn, broker, "early", "g-early", early, *no_tick)
    victim.kill()  # no tick yet: before the change, no checkpoint either
    run = start_run(spawn, broker, "early", "g-early", other, *settings)
    broker.produce("early", checkouts(100, seed=8, prefix="e"), partition_of=lambda n: n % 2)
    wait_until(lambda: consumed(other) == 100, what="100 baskets consumed by the other member", child=run)
    run.stop()  # its last checkpoint and commit: the group has offsets committed
    again = start_run(spawn, broker, "early", "g-early", early, *settings)
    assert f"resumed from {early / 'ck'} at tick 0, 0 baskets consumed" in again.stop()


@pytest.mark.slow
def test_a_broker_paused_for_15_seconds_loses_nothing(broker, spawn, tmp_path):
    broker.create_topic("paused", 2)
    baskets = checkouts(1000, seed=5, prefix="p")
    broker.produce("paused", baskets[:500], partition_of=lambda n: n % 2)
    run = start_run(
        spawn, broker, "paused", "g-paused", tmp_path, "--window-size", "5000", "--tick-every", "10"
    )
    wait_until(lambda: consumed(tmp_path) == 500, what="500 baskets consumed", child=run)
    broker.pause()
    time.sleep(OUTAGE_SECONDS)  # the outage itself (see OUTAGE_SECONDS)
    broker.resume()
    broker.produce("paused", baskets[500:], partition_of=lambda n: n % 2)
    wait_until(lambda: consumed(tmp_path) == 1000, 90, "1000 baskets consumed after the outage", run)
    run.stop()
    _, itemsets = snapshot(tmp_path)
    expected = frequent_itemsets([b["items"] for b in baskets], 1)
    assert itemsets == {tuple(sorted(k)): v for k, v in expected.items()}


@pytest.mark.slow
def test_dead_letters_to_a_kafka_topic_keep_raw_bytes_and_reasons(broker, spawn, tmp_path):
    broker.create_topic("with-bad", 1)
    broker.create_topic("dead", 1)
    bad = [b"\xff\xfe not utf-8", b'{"items": [1, 2]}']
    broker.produce("with-bad", [*checkouts(50, seed=6), *bad])
    run = start_run(
        spawn,
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
    wait_until(lambda: consumed(tmp_path) == 50, what="50 baskets consumed", child=run)
    # the bad messages follow the baskets: wait until both dead letters are in the topic
    wait_until(lambda: len(broker.read_topic("dead")) >= 2, what="2 dead letters in the topic", child=run)
    run.stop()
    letters = [(m.value, dict(m.headers)) for m in broker.read_topic("dead")]
    assert [value for value, _ in letters] == bad
    assert [headers["reason"] for _, headers in letters] == [b"invalid UTF-8", b"bad item"]
    assert [headers["offset"] for _, headers in letters] == [b"50", b"51"]
    assert all(headers["source"] == b"kafka:with-bad" for _, headers in letters)


@pytest.mark.slow
def test_a_tick_longer_than_max_poll_interval_keeps_the_group_membership(broker, spawn, tmp_path):
    from stream_miner.simulate.quest import quest_baskets

    broker.create_topic("slow", 1)
    first = [
        {"id": f"s{i}", "items": [str(x) for x in b]} for i, b in enumerate(quest_baskets(60000, seed=9))
    ]
    broker.produce("slow", first)
    command = stream_miner(
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
        # the tracker serves the stop's tick of 60 baskets within the stop's bound; the
        # default mode may start tracking only then (a first tick that long pays for it)
        "--always-track",
        "--snapshot-out",
        str(tmp_path / "snap.jsonl"),
        "--dead-letter-out",
        str(tmp_path / "dead.jsonl"),
        "--kafka-option",
        "max_poll_interval_ms=1000",
        "--kafka-option",
        "session_timeout_ms=6000",
        "--kafka-option",
        "heartbeat_interval_ms=300",
    )
    run = spawn(command)
    run.wait_ready()
    wait_until(lambda: consumed(tmp_path) == 60000, 120, "the first tick", run)  # a tick of seconds
    # 60 more baskets, then a bad message: once it is a dead letter, the baskets before it
    # in the (single) partition have been taken
    later = [{"id": f"t{i}", "items": ["late-comer"]} for i in range(60)]
    broker.produce("slow", [*later, b"end of the late-comers"])
    wait_until(lambda: line_count(tmp_path / "dead.jsonl") == 1, 60, "the late-comers' end marker", run)
    err = run.stop()
    header, itemsets = snapshot(tmp_path)
    assert header["consumed"] == 60060  # nothing read twice after a lost membership
    assert itemsets[("late-comer",)] == 60
    assert "warning" not in err
    letters = [json.loads(line) for line in (tmp_path / "dead.jsonl").read_text().splitlines()]
    assert [(letter["reason"], letter["offset"]) for letter in letters] == [("invalid JSON", 60060)]


def test_a_member_ticking_while_it_joins_still_gets_its_partitions(broker, spawn, tmp_path):
    """kafka-python 3.0 threw away a join that finished while the loop was busy (here: a tick
    every half second) and joined again; with this broker holding JoinGroup for seconds, the
    member went round for minutes without partitions (see connectors/kafka_join_fix.py). No
    checkpoint directory: looking for one loads the topic's metadata early, which hid it."""
    broker.create_topic("busy", 2)
    broker.produce("busy", checkouts(100, seed=9), partition_of=lambda n: n % 2)
    extra = ["--window-size", "1000", "--tick-interval", "0.5s"]
    run = start_run(spawn, broker, "busy", "g-busy", tmp_path, *extra, checkpoints=False)
    wait_until(lambda: consumed(tmp_path) == 100, 30, "100 baskets consumed", run)
    run.stop()
