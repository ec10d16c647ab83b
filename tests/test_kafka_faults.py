"""`stream-miner run` through broker faults: the broker stopped (SIGSTOP) or killed and
restarted mid-stream with its log kept, restarted with its log lost, a topic recreated, and
SIGTERM while the broker does not answer.

The oracle is the topic read back after the fault: every basket it holds, in order, taken
by the run exactly once (the final window equals a brute-force count of the log's last
baskets), and every bad message in the dead-letter topic exactly once. The timed pauses are
the outages themselves (OUTAGE_SECONDS); every other wait is for something observable. Each
test prints how long the run took to recover (pytest -s shows it)."""

from __future__ import annotations

import json
import re
import signal
import threading
import time

import pytest

from brute_force import frequent_itemsets
from kafka_broker import Broker, start_broker, stop_broker
from processes import wait_until
from test_kafka_run import checkouts, consumed, run_command, snapshot, start_run

pytestmark = [pytest.mark.kafka, pytest.mark.slow]

# How long a broker stays stopped or dead: longer than session_timeout_ms (6 s) in
# GROUP_OPTIONS, so the group coordinator gives the member up. The fault under test, not a
# wait for anything.
OUTAGE_SECONDS = 10
STOP_WITHIN = 5  # --stop-within for the SIGTERM test, in seconds
# what a loaded 2-core machine may add to the bound: the interpreter's start of the exit,
# the last tick's thread, process teardown
STOP_SLACK = 5
WINDOW = ["--window-size", "700", "--tick-interval", "0.3s"]
BAD_EVERY = 400  # one bad message after this many baskets


@pytest.fixture
def restartable():
    """``restartable(keep_log)`` -> a broker of the test's own that it may kill and start
    again on the same port (``Broker.restart``), with its log kept or lost; ended afterwards."""
    made = []

    def make(keep_log: bool) -> Broker:
        made.append(start_broker(kept_log=keep_log))
        return made[-1]

    yield make
    for broker in made:
        stop_broker(broker)


def stream(n, prefix):
    """``n`` baskets with a bad message after every ``BAD_EVERY``."""
    values = []
    for i, basket in enumerate(checkouts(n, seed=len(prefix), prefix=prefix)):
        values.append(basket)
        if (i + 1) % BAD_EVERY == 0:
            values.append(f"bad {prefix}{i}".encode())
    return values


class SteadyProducer(threading.Thread):
    """Produces ``values`` in batches with one idempotent producer, through outages (the
    client holds and retries what the broker does not take; the topic read back afterwards
    is the truth)."""

    def __init__(self, address, topic, values, batch=50, gap=0.1):
        super().__init__(daemon=True)
        self.address, self.topic, self.values, self.batch, self.gap = address, topic, values, batch, gap

    def run(self):
        from kafka import KafkaProducer

        producer = KafkaProducer(
            bootstrap_servers=self.address,
            acks="all",
            enable_idempotence=True,
            max_block_ms=120_000,
            request_timeout_ms=3000,  # a request lost to the outage is sent again soon after it
        )
        for start in range(0, len(self.values), self.batch):
            for value in self.values[start : start + self.batch]:
                raw = value if isinstance(value, bytes) else json.dumps(value).encode()
                producer.send(self.topic, value=raw)
            time.sleep(self.gap)  # the stream's pace
        producer.flush()
        producer.close()


def baskets_and_bad(records):
    """The log's baskets (dicts) and bad messages (raw bytes), in order."""
    baskets, bad = [], []
    for record in records:
        if record.value.startswith(b"bad "):
            bad.append(record.value)
        else:
            baskets.append(json.loads(record.value))
    return baskets, bad


def assert_exact_window(workdir, baskets, size=700):
    ids = [b["id"] for b in baskets]
    assert len(set(ids)) == len(ids), "the topic holds a basket twice"
    header, itemsets = snapshot(workdir)
    assert header["consumed"] == len(baskets) and header["last_id"] == ids[-1]
    expected = frequent_itemsets([b["items"] for b in baskets[-size:]], 1)
    assert itemsets == {tuple(sorted(k)): v for k, v in expected.items()}


def start_stream(broker, topic, values, workdir, run):
    """The first baskets (once the run has joined its group), then the rest at a steady pace
    on a thread; returns once the run is mid-stream."""
    head = 100
    broker.produce(topic, values[:head])
    wait_until(lambda: consumed(workdir) == head, 60, f"the first {head} baskets consumed", run)
    producer = SteadyProducer(broker.address, topic, values[head:])
    producer.start()
    wait_until(lambda: consumed(workdir) >= head + 300, 60, f"{head + 300} baskets consumed", run)
    return producer


def wait_for_progress(workdir, after, run, since):
    """Seconds from ``since`` until the run's snapshot counts more than ``after`` baskets."""
    wait_until(lambda: consumed(workdir) > after, 120, f"more than {after} baskets consumed", run)
    return time.monotonic() - since


def finish_stream(broker, topic, producer, workdir, run):
    """Wait for the producer, then for the run to take every basket the topic holds; the
    topic's baskets and bad messages."""
    producer.join(timeout=240)
    assert not producer.is_alive(), "the producer did not finish within 240 s"
    baskets, bad = baskets_and_bad(broker.read_topic(topic))
    wait_until(lambda: consumed(workdir) == len(baskets), 120, f"{len(baskets)} baskets consumed", run)
    return baskets, bad


def test_a_broker_stopped_mid_stream_resumes_by_itself_and_loses_nothing(broker, spawn, tmp_path):
    broker.create_topic("frozen", 1)
    broker.create_topic("frozen-dead", 1)
    dead = ["--dead-letter-out", f"kafka://{broker.address}/frozen-dead"]
    run = start_run(spawn, broker, "frozen", "g-frozen", tmp_path, *WINDOW, *dead)
    producer = start_stream(broker, "frozen", stream(3000, "f"), tmp_path, run)
    broker.pause()
    time.sleep(OUTAGE_SECONDS)  # the outage itself
    at_resume = consumed(tmp_path)
    resumed = time.monotonic()
    broker.resume()
    recovery = wait_for_progress(tmp_path, at_resume, run, resumed)
    baskets, bad = finish_stream(broker, "frozen", producer, tmp_path, run)
    err = run.stop()
    print(f"\nSIGSTOP {OUTAGE_SECONDS} s: baskets flowed again {recovery:.1f} s after SIGCONT")
    assert len(baskets) == 3000 and len(bad) == 3000 // BAD_EVERY
    assert_exact_window(tmp_path, baskets)
    assert [m.value for m in broker.read_topic("frozen-dead")] == bad
    assert "Traceback" not in err


def test_a_broker_killed_and_restarted_with_its_log_resumes_exactly(restartable, spawn, tmp_path):
    first = restartable(keep_log=True)
    first.create_topic("kept", 1)
    first.create_topic("kept-dead", 1)
    dead = ["--dead-letter-out", f"kafka://{first.address}/kept-dead"]
    run = start_run(spawn, first, "kept", "g-kept", tmp_path, *WINDOW, *dead)
    producer = start_stream(first, "kept", stream(3000, "r"), tmp_path, run)
    first.restart(signal.SIGKILL, down=OUTAGE_SECONDS)  # the outage itself, then the same port and log
    at_restart = consumed(tmp_path)
    restarted = time.monotonic()
    second = first
    recovery = wait_for_progress(tmp_path, at_restart, run, restarted)
    baskets, bad = finish_stream(second, "kept", producer, tmp_path, run)
    err = run.stop()
    print(f"\nkilled {OUTAGE_SECONDS} s, log kept: baskets flowed again {recovery:.1f} s after the restart")
    assert len(baskets) > 2000  # what the producer lost in the outage is not the run's to count
    assert_exact_window(tmp_path, baskets)
    letters = [m.value for m in second.read_topic("kept-dead")]
    assert sorted(set(letters)) == sorted(bad) and len(letters) == len(bad)
    assert re.search(r"Kafka at \S+: reading topic kept failed \(.*\); retrying in \d+ s", err)
    assert "Traceback" not in err


def test_a_broker_that_lost_its_log_stops_the_run_with_the_options(restartable, spawn, tmp_path):
    first = restartable(keep_log=False)
    first.create_topic("lost", 1)
    old = checkouts(400, seed=7, prefix="o")
    first.produce("lost", old)
    window = ["--window-size", "5000", "--tick-every", "50"]
    run = start_run(spawn, first, "lost", "g-lost", tmp_path, *window)
    wait_until(lambda: consumed(tmp_path) == 400, 60, "400 baskets consumed", run)
    first.restart(signal.SIGKILL)  # in-memory storage: the log and the group's offsets are gone
    restarted = time.monotonic()
    second = first
    new = checkouts(100, seed=8, prefix="n")
    second.produce("lost", new)  # the topic comes back (created on first use) with a shorter log
    code, err = run.finish(120)
    print(f"\nlog lost: the run stopped {time.monotonic() - restarted:.1f} s after the restart")
    assert code == 2, err
    assert "Traceback" not in err
    (line,) = [line for line in err.splitlines() if "no longer holds what was read" in line]
    assert line.startswith("stream-miner: error: Kafka topic lost at ")
    assert "--accept-new-log" in line and "--accept-gap" in line
    # a plain restart is refused at start-up, before anything is read
    again = spawn(run_command(second, "lost", "g-lost", tmp_path, *window))
    code, err = again.finish(120)
    assert code == 2 and "reading kafka:lost" not in err
    assert "no longer holds what was read" in err and "Traceback" not in err
    # the new log alone, from its first offset
    fresh = start_run(spawn, second, "lost", "g-lost", tmp_path, *window, "--accept-new-log")
    wait_until(lambda: consumed(tmp_path) == 100, 60, "the new log's 100 baskets consumed", fresh)
    fresh.stop()
    header, itemsets = snapshot(tmp_path)
    assert header["consumed"] == 100
    expected = frequent_itemsets([b["items"] for b in new], 1)
    assert itemsets == {tuple(sorted(k)): v for k, v in expected.items()}


def test_a_recreated_topic_is_noticed_at_start_up_and_can_extend_the_window(broker, spawn, tmp_path):
    from kafka.admin import KafkaAdminClient

    broker.create_topic("renewed", 1)
    old, new = checkouts(300, seed=9, prefix="a"), checkouts(500, seed=10, prefix="b")
    broker.produce("renewed", old)
    window = ["--window-size", "5000", "--tick-every", "50"]
    run = start_run(spawn, broker, "renewed", "g-renewed", tmp_path, *window)
    wait_until(lambda: consumed(tmp_path) == 300, 60, "300 baskets consumed", run)
    run.stop()
    admin = KafkaAdminClient(bootstrap_servers=broker.address)
    try:
        admin.delete_topics(["renewed"])
        wait_until(lambda: "renewed" not in admin.list_topics(), 30, "the topic deleted")
    finally:
        admin.close()
    broker.create_topic("renewed", 1)
    broker.produce("renewed", new)  # more messages than were read: offsets alone would not tell
    refused = spawn(run_command(broker, "renewed", "g-renewed", tmp_path, *window))
    code, err = refused.finish(120)
    assert code == 2, err
    assert re.search(r"the topic was recreated \(its id is \S+, the checkpoint's \S+\)", err)
    kept = start_run(spawn, broker, "renewed", "g-renewed", tmp_path, *window, "--accept-gap")
    wait_until(lambda: consumed(tmp_path) == 800, 60, "the old 300 and the new 500 baskets", kept)
    kept.stop()
    _, itemsets = snapshot(tmp_path)
    expected = frequent_itemsets([b["items"] for b in old + new], 1)
    assert itemsets == {tuple(sorted(k)): v for k, v in expected.items()}


def test_sigterm_while_the_broker_is_stopped_ends_within_the_bound(broker, spawn, tmp_path):
    broker.create_topic("unanswered", 1)
    broker.create_topic("unanswered-dead", 1)
    broker.produce("unanswered", [*checkouts(300, seed=11, prefix="u"), b"bad unanswered"])
    extra = [
        "--window-size", "1000", "--tick-every", "50",
        "--checkpoint-interval", "1s",  # dead letters go out once a commit covers them
        "--dead-letter-out", f"kafka://{broker.address}/unanswered-dead",
        "--stop-within", f"{STOP_WITHIN}s",
    ]  # fmt: skip
    run = start_run(spawn, broker, "unanswered", "g-unanswered", tmp_path, *extra)
    wait_until(lambda: consumed(tmp_path) == 300, 60, "300 baskets consumed", run)
    wait_until(lambda: len(broker.read_topic("unanswered-dead")) == 1, 60, "the dead letter sent", run)
    broker.pause()
    try:
        asked = time.monotonic()
        run.send_signal(signal.SIGTERM)
        code, err = run.finish(120)
        took = time.monotonic() - asked
    finally:
        broker.resume()
    print(f"\nSIGTERM with the broker stopped: exited after {took:.1f} s (bound {STOP_WITHIN} s)")
    assert code == 0, err
    assert took < STOP_WITHIN + STOP_SLACK
    assert re.search(r"offsets not committed to Kafka at \S+ \(.+\); the checkpoint holds them", err)
    assert "Traceback" not in err
    again = start_run(spawn, broker, "unanswered", "g-unanswered", tmp_path, *extra)
    again.wait_for_line(r"resumed from .* 300 baskets consumed")
    again.stop()
