"""Several `run` processes in one group with --coordination-topic, against a real broker.

Every complete tick's global result (read back from the coordination topic, where each
close carries it) must equal batch mining of the baskets with event time in (T - L, T] (the
independent brute-force miner), with three members as with one; the drift events of three
members equal those of one member; after a SIGKILL of a member, or of the aggregating
member, ticks are exact again, no event is lost or written twice, and no tick is closed
twice. The snapshot holds the last global tick, with its window's start and end times.
"""

from __future__ import annotations

import json
import random
import threading
import time
from collections import Counter

import pytest

from brute_force import frequent_itemsets
from kafka_broker import GROUP_OPTIONS
from processes import Child, stream_miner, wait_until
from stream_miner.cluster.wire import CLOSE, Message, Reassembly

pytestmark = pytest.mark.kafka

N, START, STEP = 6000, 1_000_000.0, 0.1  # baskets and their event times: START + i * STEP
LENGTH, EVERY, LATENESS = 120.0, 30.0, 20.0  # window, tick interval, allowed lateness (seconds)
PROMO = ("promo-kite", "promo-string")  # bought together only from basket 2000 to 4000
SETTINGS = ["--window-time", "120s", "--tick-interval", "30s", "--allowed-lateness", "20s"]
SETTINGS += ["--min-support", "0.05", "--rules", "--tick-wait", "20s", "--quiet"]
TICKS = [EVERY * k for k in range(33334, 33353)]  # multiples of 30 s from the first basket to the
LAST_TICK = TICKS[-1]  # last boundary the watermark (the newest time less the lateness) passes


def rows() -> list[dict]:
    rng = random.Random(11)
    items = [f"item-{k}" for k in range(30)]
    out = []
    for i in range(N):
        basket = set(rng.sample(items, rng.randint(1, 5)))
        if 2000 < i < 4000 and rng.random() < 0.3:
            basket |= set(PROMO)
        out.append({"id": f"b{i}", "ts": START + i * STEP, "items": sorted(basket)})
    return out


def expected(data: list[dict], tick: float) -> tuple[int, dict]:
    """The window's size and frequent itemsets at ``tick``, by brute force."""
    window = [row["items"] for row in data if tick - LENGTH < row["ts"] <= tick]
    threshold = -(-len(window) * 5 // 100)
    return len(window), frequent_itemsets(window, max(1, threshold))


def produce(
    broker, topic: str, data: list[dict], *, pace: float = 0.0, halfway: threading.Event | None = None, into=6
):
    """Write ``data`` round robin over the first ``into`` partitions, 100 at a time, ``pace`` s apart."""
    from kafka import KafkaProducer

    producer = KafkaProducer(bootstrap_servers=broker.address, acks="all")
    for n, row in enumerate(data):
        producer.send(topic, value=json.dumps(row).encode(), partition=n % into)
        if n % 100 == 99:
            producer.flush()
            time.sleep(pace)
        if halfway is not None and n == len(data) * 2 // 5:
            halfway.set()
    producer.flush()
    producer.close()


def member(spawn, broker, topic: str, workdir) -> Child:
    command = stream_miner(
        "run",
        "--source",
        f"kafka://{broker.address}/{topic}",
        "--group",
        f"g-{topic}",
        "--coordination-topic",
        f"{topic}-coord",
        *SETTINGS,
        "--snapshot-out",
        str(workdir / "snap.jsonl"),
        "--events-out",
        str(workdir / "events.jsonl"),
        "--metrics-port",
        "0",
    )
    for option in GROUP_OPTIONS:
        command += ["--kafka-option", option]
    workdir.mkdir(exist_ok=True)
    child = spawn(command)
    child.wait_ready()
    return child


def closes(broker, topic: str) -> list[Message]:
    """Every close on the coordination topic, in order."""
    reassembly = Reassembly(open("/dev/null", "w"))  # noqa: SIM115 - warnings are not under test here
    found = []
    for record in broker.read_topic(f"{topic}-coord"):
        message = reassembly.take(record.value, record.headers)
        if message is not None and message.kind == CLOSE:
            found.append(message)
    return found


def scrape(child: Child) -> dict[str, float]:
    """The member's metrics now (unlabelled samples)."""
    from urllib.request import urlopen

    from prometheus_client.parser import text_string_to_metric_families

    url = child.wait_for_line(r"metrics on (\S+)").group(1)
    text = urlopen(url, timeout=10).read().decode()
    return {s.name: s.value for f in text_string_to_metric_families(text) for s in f.samples if not s.labels}


def run_members(
    spawn, broker, topic: str, workdir, count: int, data, *, pace=0.0, victim=None, before_stop=None, empty=0
):
    """Start ``count`` members, let them settle, write the data (into all 6 partitions but the
    last ``empty``), optionally SIGKILL one (``victim(members)`` picks it) when 40 % is
    written; wait for the last tick's close."""
    broker.create_topic(topic, 6)
    broker.create_topic(f"{topic}-coord", 1)
    members = [member(spawn, broker, topic, workdir) for _ in range(count)]
    broker.wait_for_stable_group(f"g-{topic}", count)
    wait_until(lambda: any("elected aggregator" in m.stderr for m in members), 60, "an elected aggregator")
    halfway = threading.Event()
    writer = threading.Thread(
        target=produce,
        args=(broker, topic, data),
        kwargs={"pace": pace, "halfway": halfway, "into": 6 - empty},
    )
    writer.start()
    killed_at = None
    if victim is not None:
        assert halfway.wait(120)
        killed = victim(members)
        killed.kill()
        killed_at = max((m.tick for m in closes(broker, topic)), default=START)
    writer.join()
    wait_until(
        lambda: any(m.tick == LAST_TICK for m in closes(broker, topic)),
        180,
        "the last tick's close",
        members[0],
    )
    alive = [child for child in members if child.process.poll() is None]
    if before_stop is not None:
        before_stop(alive)
    for child in alive:
        child.stop()
    return closes(broker, topic), killed_at


def check_exact(data, found: list[Message]) -> list[float]:
    """Every complete close equals brute force; the ticks checked."""
    checked = []
    for close in found:
        if not close.body["complete"]:
            continue
        result = close.body["state"]["result"]
        n, itemsets = expected(data, close.tick)
        assert result["n"] == n, f"tick {close.tick}"
        assert {tuple(items): count for items, count in result["itemsets"]} == itemsets, f"tick {close.tick}"
        checked.append(close.tick)
    return checked


def events_of(workdir) -> list[dict]:
    path = workdir / "events.jsonl"
    return [json.loads(line) for line in path.read_text().splitlines()] if path.exists() else []


@pytest.fixture(scope="module")
def solo(broker, tmp_path_factory):
    """One member over the data: its closes and events (the reference for the others)."""
    from processes import Child

    children: list[Child] = []

    def spawn(command):
        children.append(Child(command))
        return children[-1]

    workdir = tmp_path_factory.mktemp("solo")
    try:
        found, _ = run_members(spawn, broker, "solo", workdir, 1, rows())
    finally:
        for child in children:
            child.kill()
    return found, events_of(workdir)


def test_one_member_ticks_exactly_and_finds_the_promotion(solo):
    found, events = solo
    assert all(close.body["complete"] for close in found)
    ticks = check_exact(rows(), found)
    assert ticks == TICKS
    assert [(e["event"], tuple(e["items"])) for e in events] == [("emerged", PROMO), ("faded", PROMO)]


def test_three_members_equal_one(solo, broker, spawn, tmp_path):
    seen: list[dict[str, float]] = []

    def settled(alive: list[Child]) -> bool:  # the last tick reached the aggregator's metrics
        seen[:] = map(scrape, alive)
        return any(m.get("stream_miner_window_transactions") == expected(rows(), LAST_TICK)[0] for m in seen)

    found, _ = run_members(
        spawn,
        broker,
        "trio",
        tmp_path,
        3,
        rows(),
        before_stop=lambda alive: wait_until(lambda: settled(alive), 30),
    )
    assert sorted(m["stream_miner_aggregating"] for m in seen) == [0, 0, 1]
    aggregator = next(m for m in seen if m["stream_miner_aggregating"] == 1)
    assert aggregator["stream_miner_window_transactions"] == expected(rows(), LAST_TICK)[0]
    assert (
        aggregator["stream_miner_patterns_emerged_total"]
        == aggregator["stream_miner_patterns_faded_total"]
        == 1
    )
    taken = sum(m["stream_miner_transactions_total"] for m in seen)  # each member's own ingest
    assert sum(row["ts"] <= LAST_TICK for row in rows()) <= taken <= N  # later ones may still wait
    ticks = check_exact(rows(), found)
    assert set(ticks) <= set(TICKS) and ticks == sorted(ticks)
    assert (
        ticks[-15:] == TICKS[-15:]
    )  # a slow start (three processes compiling on two cores) may cost the first
    assert events_of(tmp_path) == solo[1]
    header, *lines = (tmp_path / "snap.jsonl").read_text().splitlines()
    head = json.loads(header)
    assert (head["start_time"], head["end_time"]) == (LAST_TICK - LENGTH, LAST_TICK)
    n, itemsets = expected(rows(), LAST_TICK)
    assert head["size"] == n
    snapshot = {tuple(r["items"]): r["count"] for r in map(json.loads, lines) if r["type"] == "itemset"}
    assert snapshot == itemsets


def not_aggregating(members: list[Child]) -> Child:
    return next(m for m in members if "elected aggregator" not in m.stderr)


def aggregating(members: list[Child]) -> Child:
    return next(m for m in members if m.stderr.rfind("elected aggregator") > m.stderr.rfind("no longer the"))


@pytest.mark.parametrize("victim", [not_aggregating, aggregating], ids=["member", "aggregator"])
def test_a_killed_process_loses_and_repeats_nothing(solo, broker, spawn, tmp_path, victim):
    topic = f"kill-{victim.__name__}"
    found, killed_at = run_members(spawn, broker, topic, tmp_path, 3, rows(), pace=0.4, victim=victim)
    ticks = check_exact(rows(), found)
    assert len([t for t in ticks if t > killed_at + 2 * EVERY]) >= 3  # exact again after the handover
    complete = Counter(c.tick for c in found if c.body["complete"])
    assert max(complete.values()) == 1  # no tick published twice
    events = events_of(tmp_path)
    assert len({e["id"] for e in events}) == len(events)
    assert [(e["event"], e["items"]) for e in events] == [(e["event"], e["items"]) for e in solo[1]]


@pytest.mark.parametrize("partitions, message", [(None, "no such topic"), (2, "needs exactly one")])
def test_a_missing_or_split_coordination_topic_is_one_line(broker, spawn, tmp_path, partitions, message):
    topic = f"lonely-{partitions}"
    broker.create_topic(topic, 2)
    if partitions is not None:
        broker.create_topic(f"{topic}-coord", partitions)
    command = stream_miner(
        "run", "--source", f"kafka://{broker.address}/{topic}", "--group", "g", "--coordination-topic",
        f"{topic}-coord", *SETTINGS,
    )  # fmt: skip
    code, err = spawn(command).finish(60)
    assert code == 2 and message in err
    assert err.strip().splitlines()[-1].startswith("stream-miner: error: --coordination-topic")


def test_members_whose_partitions_stay_empty_still_take_part(solo, broker, spawn, tmp_path):
    found, _ = run_members(spawn, broker, "sparse", tmp_path, 3, rows(), empty=2)
    ticks = check_exact(rows(), found)
    assert ticks[-15:] == TICKS[-15:]  # the member holding the two empty partitions answers too
    assert [(e["event"], e["items"]) for e in events_of(tmp_path)] == [
        (e["event"], e["items"]) for e in solo[1]
    ]
