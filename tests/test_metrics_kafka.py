"""`stream-miner run --metrics-port` on a Kafka topic (the test broker): exact counts and a
consumer-lag series per assigned partition, scraped over HTTP."""

from __future__ import annotations

import pytest

from kafka_broker import GROUP_OPTIONS
from processes import stream_miner, wait_until
from test_metrics import rejected_by_reason, scrape, summary_counts, value

pytestmark = pytest.mark.kafka


def lag_by_partition(samples) -> dict[str, float]:
    return {
        dict(labels)["partition"]: n
        for (name, labels), n in samples.items()
        if name == "stream_miner_consumer_lag_messages"
    }


@pytest.mark.slow
def test_counts_and_lag_per_partition_from_a_topic(broker, spawn, tmp_path):
    broker.create_topic("watched", 3)
    baskets = [{"id": f"w{i}", "items": [f"g{i % 7}", f"g{i % 5}"]} for i in range(900)]
    bad = [b"not json", b'{"items": "tea"}']
    broker.produce("watched", [*baskets[:600], *bad], partition_of=lambda n: n % 3)
    options = "--group g-watched --window-size 5000 --tick-every 100 --min-support 0.05 --metrics-port 0"
    source = f"kafka://{broker.address}/watched"
    kafka = [f"--kafka-option={option}" for option in GROUP_OPTIONS]
    command = stream_miner("run", "--source", source, *options.split(), *kafka)
    run = spawn(command)
    url = run.wait_for_line(r"^stream-miner: metrics on (http://\S+/metrics)$").group(1)

    def caught_up(total: int):
        samples = scrape(url)
        lag = lag_by_partition(samples)
        done = value(samples, "stream_miner_transactions_total") == total and lag == dict.fromkeys("012", 0)
        return samples if done else None

    samples = wait_until(lambda: caught_up(600), what="600 baskets and no lag on partitions 0-2", child=run)
    assert rejected_by_reason(samples) == {"invalid JSON": 1, "items not a list": 1}
    broker.produce("watched", baskets[600:], partition_of=lambda n: n % 3)
    samples = wait_until(lambda: caught_up(900), what="900 baskets and no lag on partitions 0-2", child=run)
    err = run.stop()
    baskets_seen, ticks, _, letters = summary_counts(err)
    assert baskets_seen == 900 == value(samples, "stream_miner_transactions_total")
    assert letters == rejected_by_reason(samples)
    assert ticks >= value(samples, "stream_miner_ticks_total") >= 9
