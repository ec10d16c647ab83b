"""The pieces of the fault campaign (simulations/fault_campaign.py): a seeded message stream,
a paced producer, ``stream-miner run`` members as separate processes, the group's committed
offsets, the oracle read back from the topic, and the per-basket accounting.

Every basket carries one marker item ``#<id>`` besides its real items, so a member's
snapshot says how often each basket was counted: with ``--max-size 1 --min-count 1`` every
marker is listed with its count; with ``--min-count 2`` a marker is listed only when its
basket was counted more than once, and the window's size gives the number lost.
"""

from __future__ import annotations

import json
import random
import re
import signal
import subprocess
import sys
import threading
import time
import zlib
from collections import Counter
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
from kafka_broker import GROUP_OPTIONS, Broker
from processes import Child, stream_miner

VOCABULARY = [f"i{k:02d}" for k in range(30)]
POPULARITY = [1 / (k + 1) for k in range(len(VOCABULARY))]  # Zipf-like: a few items are common
MARKER = "#"
DUPLICATE_SHARE = 0.04  # baskets sent twice: half right after, half later (still in the window)
FAR_DUPLICATE = (50, 2000)  # how many messages later a far duplicate follows
BAD_SHARE = 0.02  # bad messages among all
BAD_MESSAGES: list[bytes | None] = [
    b"{not json",  # invalid JSON
    b"",  # empty value
    None,  # no value at all (a tombstone)
    b"\xff\xfe",  # invalid UTF-8
    b"[1, 2]",  # not an object
    b'{"id": "bad", "items": "i01"}',  # items not a list
    b'{"id": "bad", "items": ["i01", 7]}',  # an item of the wrong type
    b'{"id": ["bad"], "items": ["i01"]}',  # an id of the wrong type
    b'{"id": "bad", "items": []}',  # empty basket
]
PACE_STEP = 0.1  # seconds per producer batch: the producer's rate is part of the scenario
ONE_LINE = re.compile(
    r"^stream-miner: .*\b(error|warning|cannot|retrying|failed|not committed)\b", re.I | re.M
)
TICK_SECONDS = 0.2  # members tick (and so write snapshots) this often, as tests/test_kafka_run.py
CHECKPOINT_SECONDS = 5  # and checkpoint (then commit) at the first tick after this long
STOP_DEADLINE = 150.0  # seconds a member gets to exit after SIGTERM before it is killed
READY_WITHIN = 120.0  # seconds a member gets to print its readiness line


# ------------------------------------------------------------------ the stream
@dataclass(frozen=True)
class Message:
    """One message to produce: its value, partition and basket id (None for a bad one)."""

    value: bytes | None
    partition: int
    basket_id: str | None


def make_stream(n: int, seed: int, partitions: int) -> list[Message]:
    """``n`` distinct baskets with seeded duplicates and bad messages mixed in. A basket and
    its duplicates go to one partition (by id), bad messages to any."""
    rnd = random.Random(seed)
    keyed: list[tuple[float, Message]] = []
    for k in range(n):
        basket_id = f"b{k}"
        items = sorted(set(rnd.choices(VOCABULARY, POPULARITY, k=rnd.randint(1, 5))))
        value = json.dumps({"id": basket_id, "items": [MARKER + basket_id, *items]}).encode()
        message = Message(value, zlib.crc32(basket_id.encode()) % partitions, basket_id)
        keyed.append((k, message))
        if rnd.random() < DUPLICATE_SHARE:
            later = 0.5 if rnd.random() < 0.5 else rnd.randint(*FAR_DUPLICATE) + 0.5
            keyed.append((min(k + later, n - 0.5), message))
    for _ in range(round(len(keyed) * BAD_SHARE / (1 - BAD_SHARE))):
        keyed.append((rnd.uniform(0, n), Message(rnd.choice(BAD_MESSAGES), rnd.randrange(partitions), None)))
    keyed.sort(key=lambda pair: pair[0])
    return [message for _, message in keyed]


# ---------------------------------------------------------------- the producer
class Producer:
    """Sends messages on a thread at a steady rate, in batches of ``rate * PACE_STEP``; counts
    per partition what the broker acknowledged (after each batch's flush)."""

    def __init__(self, broker: Broker, topic: str, rate: int) -> None:
        self.broker = broker
        self.topic = topic
        self.rate = rate
        self.acked: Counter[int] = Counter()
        self._lock = threading.Lock()
        self._thread: threading.Thread | None = None
        self._error: BaseException | None = None

    def send(self, messages: Sequence[Message]) -> None:
        """Start sending ``messages`` (after waiting for the previous batch to be sent)."""
        self.wait()
        self._thread = threading.Thread(target=self._run, args=(messages,), daemon=True)
        self._thread.start()

    def wait(self) -> None:
        """Wait until everything handed to :meth:`send` is acknowledged."""
        if self._thread is not None:
            self._thread.join()
            self._thread = None
        self._check()

    def _check(self) -> None:
        if self._error is not None:
            raise RuntimeError(f"the campaign's producer failed: {self._error!r}") from self._error

    @property
    def busy(self) -> bool:
        return self._thread is not None and self._thread.is_alive()

    def snapshot(self) -> dict[int, int]:
        """Acknowledged messages per partition, now."""
        self._check()
        with self._lock:
            return dict(self.acked)

    def total(self) -> int:
        """Acknowledged messages, now (raises when the producer failed)."""
        self._check()
        with self._lock:
            return sum(self.acked.values())

    def _run(self, messages: Sequence[Message]) -> None:
        from kafka import KafkaProducer

        producer = KafkaProducer(bootstrap_servers=self.broker.address, acks="all")
        step = max(1, round(self.rate * PACE_STEP))
        try:
            for start in range(0, len(messages), step):
                began = time.monotonic()
                batch = messages[start : start + step]
                for message in batch:
                    key = b"no value" if message.value is None else None  # a null value needs a key
                    producer.send(self.topic, key=key, value=message.value, partition=message.partition)
                producer.flush()
                with self._lock:
                    self.acked.update(message.partition for message in batch)
                time.sleep(max(0.0, PACE_STEP - (time.monotonic() - began)))
        except BaseException as error:  # handed to wait()
            self._error = error
        finally:
            producer.close()


# ------------------------------------------------------------------- a member
@dataclass
class Observed:
    """What the members' stderr and stops showed, over every life of every member."""

    one_line_errors: int = 0
    tracebacks: int = 0
    exits: int = 0  # members that exited by themselves (restarted by the harness)
    stop_seconds: list[float] = field(default_factory=list)
    unclean_stops: int = 0  # a SIGTERM that did not end in exit code 0 within STOP_DEADLINE


class Member:
    """One ``stream-miner run`` member, started again with the same command after every stop
    or kill, like a service manager would; every life's stderr is kept in its directory."""

    def __init__(self, name: str, workdir: Path, command: list[str], observed: Observed) -> None:
        self.name = name
        self.workdir = workdir
        self.command = command
        self.observed = observed
        self.child: Child | None = None
        self.lives = 0
        self.started_at = 0.0
        workdir.mkdir(parents=True, exist_ok=True)

    @property
    def snapshot_path(self) -> Path:
        return self.workdir / "snap.jsonl"

    def start(self) -> None:
        """Start a new life and wait for its readiness line."""
        self.lives += 1
        self.started_at = time.time()
        self.child = Child(self.command)
        self.child.wait_ready(READY_WITHIN)

    def alive(self) -> bool:
        return self.child is not None and self.child.process.poll() is None

    def kill(self) -> None:
        """SIGKILL the current life."""
        assert self.child is not None
        self.child.kill()
        self._harvest()

    def signal(self) -> float:
        """SIGTERM the current life; the moment it was sent (see :meth:`finish_stop`)."""
        assert self.child is not None
        sent = time.monotonic()
        self.child.send_signal(signal.SIGTERM)
        return sent

    def finish_stop(self, sent: float) -> None:
        """Wait for the life SIGTERMed at ``sent`` to exit; record the seconds it took."""
        assert self.child is not None
        process = self.child.process
        try:
            process.wait(timeout=max(0.0, STOP_DEADLINE - (time.monotonic() - sent)))
        except subprocess.TimeoutExpired:  # killed, counted as an unclean stop
            self.child.kill()
        self.observed.stop_seconds.append(round(time.monotonic() - sent, 2))
        if process.returncode != 0:
            self.observed.unclean_stops += 1
        self._harvest()

    def stop(self) -> None:
        """SIGTERM and wait for the exit (timed)."""
        self.finish_stop(self.signal())

    def restart_if_exited(self) -> bool:
        """Start a new life when the current one exited by itself (counted); True if it had."""
        if self.child is None or self.alive():
            return False
        self.observed.exits += 1
        self._harvest()
        self.start()
        return True

    def stderr(self) -> str:
        return "" if self.child is None else self.child.stderr

    def discard(self) -> None:
        """Kill a life left running when a scenario ends early (nothing counted)."""
        if self.child is not None:
            self.child.kill()
            self.child = None

    def ticked(self) -> bool:
        """True once this life has written a snapshot."""
        try:
            return self.snapshot_path.stat().st_mtime >= self.started_at
        except OSError:
            return False

    def consumed(self) -> int:
        """Baskets in this life's latest snapshot (0 before its first tick)."""
        if not self.ticked():
            return 0
        try:
            with self.snapshot_path.open() as stream:
                return int(json.loads(stream.readline())["consumed"])
        except (OSError, ValueError, KeyError):  # replaced or cut meanwhile: look again later
            return 0

    def _harvest(self) -> None:
        """Count what the ended life printed and keep its stderr."""
        assert self.child is not None
        self.child.finish(timeout=30)
        text = self.child.stderr
        (self.workdir / f"stderr.{self.lives}.txt").write_text(text)
        self.observed.one_line_errors += len(ONE_LINE.findall(text))
        self.observed.tracebacks += text.count("Traceback")
        self.child = None


def member_command(
    broker: Broker, topic: str, group: str, workdir: Path, dead_letters: str, *, per_basket: bool
) -> list[str]:
    """``stream-miner run`` over ``topic`` with a window larger than any stream here.
    ``per_basket``: every marker listed (``--min-count 1 --max-size 1``); else itemsets of up
    to three items counted at least twice (markers listed only when counted twice)."""
    mining = (
        ["--min-count", "1", "--max-size", "1"] if per_basket else ["--min-count", "2", "--max-size", "3"]
    )
    command = stream_miner(
        "run",
        "--source",
        f"kafka://{broker.address}/{topic}",
        "--group",
        group,
        "--window-size",
        "10000000",
        "--tick-interval",
        f"{TICK_SECONDS}s",
        *mining,
        "--checkpoint-dir",
        str(workdir / "ck"),
        "--checkpoint-interval",
        f"{CHECKPOINT_SECONDS}s",
        "--snapshot-out",
        str(workdir / "snap.jsonl"),
        "--dead-letter-out",
        dead_letters,
        "--kafka-option",
        "max_poll_records=200",
    )
    for option in GROUP_OPTIONS:
        command += ["--kafka-option", option]
    return command


def watch(condition: Callable[[], object], timeout: float, tend: Callable[[], None] | None = None) -> bool:
    """Poll ``condition`` until it holds (True) or ``timeout`` s pass (False), calling ``tend``
    (restarts, recovery checks) between looks."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if condition():
            return True
        if tend is not None:
            tend()
        time.sleep(0.2)
    return bool(condition())


# ---------------------------------------------------------------- the group
def committed(broker: Broker, group: str, topic: str, partitions: Iterable[int]) -> dict[int, int]:
    """The group's committed next offset per partition (-1: none), as the broker reports it."""
    from kafka import KafkaConsumer, TopicPartition
    from kafka.errors import KafkaError

    reader = KafkaConsumer(bootstrap_servers=broker.address, group_id=group, enable_auto_commit=False)
    try:
        offsets = {}
        for p in partitions:
            try:
                offsets[p] = reader.committed(TopicPartition(topic, p)) or -1
            except KafkaError:  # a coordinator that is moving or not back yet: not caught up
                offsets[p] = -1
        return offsets
    finally:
        reader.close()


def caught_up(broker: Broker, group: str, topic: str, targets: dict[int, int]) -> Callable[[], bool]:
    """A condition: the group committed at least ``targets`` (next offset per partition)."""

    def check() -> bool:
        now = committed(broker, group, topic, targets)
        return all(now[p] >= target for p, target in targets.items())

    return check


# ----------------------------------------------------------------- the oracle
@dataclass
class Oracle:
    """What the topic holds, read back and decoded independently of stream-miner."""

    baskets: dict[str, list[str]]  # distinct id -> real items (marker removed)
    resent: set[str]  # ids that appear more than once
    bad: set[tuple[int, int]]  # (partition, offset) of every bad message
    ends: dict[int, int]  # next offset per partition
    messages: int


def read_oracle(broker: Broker, topic: str, partitions: int) -> Oracle:
    """Read the whole topic back and decode it (bad ones set aside, baskets deduplicated by id)."""
    baskets: dict[str, list[str]] = {}
    resent: set[str] = set()
    bad: set[tuple[int, int]] = set()
    ends = dict.fromkeys(range(partitions), 0)
    records = broker.read_topic(topic)
    for record in records:
        ends[record.partition] = record.offset + 1
        decoded = decode(record.value)
        if decoded is None:
            bad.add((record.partition, record.offset))
        elif decoded[0] in baskets:
            resent.add(decoded[0])
        else:
            baskets[decoded[0]] = [item for item in decoded[1] if not item.startswith(MARKER)]
    return Oracle(baskets, resent, bad, ends, len(records))


def decode(value: bytes | None) -> tuple[str, list[str]] | None:
    """(id, items) of a well-formed basket message, None for anything else."""
    try:
        message = json.loads(value) if value is not None else None
    except ValueError:  # invalid JSON or UTF-8
        return None
    if not isinstance(message, dict):
        return None
    basket_id, items = message.get("id"), message.get("items")
    if not isinstance(basket_id, str) or not isinstance(items, list) or not items:
        return None
    if not all(isinstance(item, str) for item in items):
        return None
    return basket_id, sorted(set(items))


def reference_itemsets(baskets: Iterable[list[str]], min_count: int, max_size: int) -> dict[tuple, int]:
    """Itemsets counted at least ``min_count`` times, of at most ``max_size`` items, by pyfim."""
    import fim

    found = fim.fpgrowth(list(baskets), supp=-min_count, zmax=max_size, report="a")
    return {tuple(sorted(items)): count for items, count in found}


# ------------------------------------------------------------- the accounting
def snapshot_itemsets(path: Path) -> tuple[dict, dict[tuple, int]]:
    """A snapshot's header and its itemsets (sorted item tuples -> count)."""
    lines = [json.loads(line) for line in path.read_text().splitlines()]
    return lines[0], {tuple(r["items"]): r["count"] for r in lines[1:] if r["type"] == "itemset"}


def split_markers(itemsets: dict[tuple, int]) -> tuple[Counter[str], dict[tuple, int]]:
    """Marker counts by basket id, and the itemsets of real items only."""
    markers: Counter[str] = Counter()
    real = {}
    for items, count in itemsets.items():
        if items[0].startswith(MARKER):  # "#" sorts before every real item
            if len(items) == 1:
                markers[items[0][1:]] += count
        else:
            real[items] = count
    return markers, real


def dead_letter_keys(
    broker: Broker, files: Iterable[Path], topics: Iterable[str]
) -> Counter[tuple[int, int]]:
    """(partition, offset) of every dead letter written, over all files and topics."""
    keys: Counter[tuple[int, int]] = Counter()
    for path in files:
        if path.exists():
            for line in path.read_text().splitlines():
                letter = json.loads(line)
                keys[(letter["partition"], letter["offset"])] += 1
    for topic in topics:
        for record in broker.read_topic(topic):
            headers = dict(record.headers)
            keys[(int(headers["partition"]), int(headers["offset"]))] += 1
    return keys


@dataclass
class Figures:
    """One scenario's figures (see the campaign's README text for each)."""

    scenario: str
    seed: int
    produced: int  # distinct basket ids in the topic
    messages: int  # every message in the topic (duplicates and bad ones too)
    resent: int  # basket ids sent more than once
    counted: int  # baskets counted, over all members (a double counts twice)
    lost: int  # baskets counted by no member
    double_counted: int  # baskets counted more than once
    double_counted_resent: int  # of which ids that were sent more than once
    itemsets_differing: int  # itemsets (or summed items) whose counts differ from the oracle's
    bad_produced: int
    dead_letters_written: int
    dead_letters_missing: int
    dead_letters_twice: int  # bad messages written more than once
    dead_letters_unexpected: int  # written, but not a bad message of the topic
    faults: int
    recoveries: int
    max_recovery_seconds: float  # from the end of a fault to the group's commit of all produced
    recovery_seconds: list[float]
    one_line_errors: int
    tracebacks: int
    exits: int
    unclean_stops: int
    max_stop_seconds: float
    stop_seconds: list[float]
    wall_seconds: float


def dead_letter_figures(oracle: Oracle, written: Counter[tuple[int, int]]) -> dict[str, int]:
    return {
        "bad_produced": len(oracle.bad),
        "dead_letters_written": sum(written.values()),
        "dead_letters_missing": len(oracle.bad - set(written)),
        "dead_letters_twice": sum(1 for key, n in written.items() if n > 1 and key in oracle.bad),
        "dead_letters_unexpected": len(set(written) - oracle.bad),
    }


def basket_figures(oracle: Oracle, times: Counter[str], counted: int) -> dict[str, int]:
    """Lost and double-counted baskets from how many times each id was counted (``times``
    holds at least every id counted more than once) and the total count."""
    doubles = {basket_id for basket_id, n in times.items() if n > 1}
    distinct = counted - sum(times[basket_id] - 1 for basket_id in doubles)
    return {
        "counted": counted,
        "lost": len(oracle.baskets) - distinct,
        "double_counted": len(doubles),
        "double_counted_resent": len(doubles & oracle.resent),
    }


def observed_figures(observed: Observed) -> dict[str, object]:
    return {
        "one_line_errors": observed.one_line_errors,
        "tracebacks": observed.tracebacks,
        "exits": observed.exits,
        "unclean_stops": observed.unclean_stops,
        "max_stop_seconds": max(observed.stop_seconds, default=0.0),
        "stop_seconds": observed.stop_seconds,
    }
