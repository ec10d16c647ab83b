"""A real Prometheus server for tests: the `prometheus` binary (Debian package `prometheus`)
started on a free loopback port with a configuration and a storage directory of its own.

It scrapes and evaluates every second (``scrape_interval`` and ``evaluation_interval`` 1 s),
so a test sees a scraped value or an alert's state change within seconds; every wait polls
the HTTP API under a deadline. It never uses the Debian service's port (9090) or storage, so
a service the package started on the same machine neither helps nor collides.

Without the binaries the tests that need them skip, naming the package; with
``STREAM_MINER_REQUIRE_PROMETHEUS=1`` (set by .ci/run) they fail instead.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import urllib.error
import urllib.parse
import urllib.request
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest

from kafka_broker import free_port
from processes import wait_until

REQUIRE = "STREAM_MINER_REQUIRE_PROMETHEUS"


def binary(name: str) -> str:
    """The path of ``name`` (``prometheus`` or ``promtool``); skip the test without it, or
    fail when ``STREAM_MINER_REQUIRE_PROMETHEUS=1``."""
    path = shutil.which(name)
    if path is not None:
        return path
    reason = f"needs the {name} binary: install the Debian package prometheus (apt-get install prometheus)"
    if os.environ.get(REQUIRE) == "1":
        pytest.fail(f"{REQUIRE}=1 but {reason}")
    pytest.skip(reason)


@dataclass
class PrometheusServer:
    process: subprocess.Popen
    url: str  # http://127.0.0.1:PORT
    directory: Path  # its configuration, storage and log

    @property
    def log(self) -> str:
        """What the server wrote so far (its stderr)."""
        return (self.directory / "prometheus.log").read_text(errors="replace")

    def api(self, path: str, **params: str) -> Any:
        """GET ``/api/v1/PATH`` with ``params``: the answer's ``data`` (fails the test unless
        the status is ``success``, with Prometheus's error message)."""
        query = f"?{urllib.parse.urlencode(params)}" if params else ""
        try:
            with urllib.request.urlopen(f"{self.url}/api/v1/{path}{query}", timeout=10) as response:
                answer = json.load(response)
        except urllib.error.HTTPError as error:  # 400/422: a bad query, with the reason in the body
            answer = json.load(error)
        if answer.get("status") != "success":
            pytest.fail(
                f"Prometheus /api/v1/{path} {params}: {answer.get('errorType')}: {answer.get('error')}"
            )
        return answer["data"]

    def query(self, expr: str) -> list[dict]:
        """The instant vector of ``expr`` now (``/api/v1/query``): ``[{"metric": {...},
        "value": [time, "text"]}, ...]``."""
        data = self.api("query", query=expr)
        assert data["resultType"] in ("vector", "scalar"), data
        return data["result"] if data["resultType"] == "vector" else [{"metric": {}, "value": data["result"]}]

    def alerts(self) -> list[dict]:
        """Every pending or firing alert (``/api/v1/alerts``), with its ``labels`` and ``state``."""
        return self.api("alerts")["alerts"]

    def rule_groups(self) -> list[dict]:
        """Every loaded rule group (``/api/v1/rules``) with its rules, their health and last
        evaluation."""
        return self.api("rules")["groups"]

    def wait_for_alert(
        self, name: str, states: Sequence[str] = ("pending", "firing"), timeout: float = 60
    ) -> dict:
        """The first alert named ``name`` in one of ``states``, waited for under ``timeout`` s."""

        def found() -> dict | None:
            return next(
                (a for a in self.alerts() if a["labels"].get("alertname") == name and a["state"] in states),
                None,
            )

        return wait_until(found, timeout, lambda: f"alert {name} {'/'.join(states)}; server log:\n{self.log}")


def start_prometheus(
    directory: Path, rule_files: Iterable[Path] = (), targets: Iterable[str] = (), timeout: float = 60
) -> PrometheusServer:
    """A Prometheus server on a free loopback port, loading ``rule_files`` and scraping the
    ``/metrics`` of ``targets`` (``HOST:PORT``) as job ``stream-miner``; its configuration,
    storage and log go under ``directory``. Returns once ``/-/ready`` answers."""
    directory.mkdir(parents=True, exist_ok=True)
    config = {
        "global": {"scrape_interval": "1s", "evaluation_interval": "1s", "scrape_timeout": "1s"},
        "rule_files": [str(path) for path in rule_files],
        "scrape_configs": [{"job_name": "stream-miner", "static_configs": [{"targets": list(targets)}]}],
    }
    (directory / "prometheus.yml").write_text(json.dumps(config, indent=2))  # JSON is YAML
    address = f"127.0.0.1:{free_port()}"
    command = [
        binary("prometheus"),
        f"--config.file={directory / 'prometheus.yml'}",
        f"--storage.tsdb.path={directory / 'data'}",
        f"--web.listen-address={address}",
    ]
    with open(directory / "prometheus.log", "wb") as log:
        process = subprocess.Popen(command, stdout=log, stderr=subprocess.STDOUT)
    server = PrometheusServer(process, f"http://{address}", directory)
    try:
        wait_until(
            lambda: _ready(server), timeout, lambda: f"Prometheus ready at {server.url}; log:\n{server.log}"
        )
    except BaseException:
        stop_prometheus(server)
        raise
    return server


def _ready(server: PrometheusServer) -> bool:
    if server.process.poll() is not None:
        pytest.fail(
            f"prometheus exited ({server.process.returncode}) before it was ready; log:\n{server.log}"
        )
    try:
        with urllib.request.urlopen(f"{server.url}/-/ready", timeout=1) as response:
            return response.status == 200
    except OSError:  # not listening yet, or 503 while it starts
        return False


def stop_prometheus(server: PrometheusServer, timeout: float = 20) -> None:
    """SIGTERM and wait for the server to exit (SIGKILL after ``timeout`` s)."""
    if server.process.poll() is None:
        server.process.send_signal(signal.SIGTERM)
        try:
            server.process.wait(timeout=timeout)
        except subprocess.TimeoutExpired:
            server.process.kill()
            server.process.wait()
            pytest.fail(f"prometheus did not stop within {timeout} s of SIGTERM; log:\n{server.log}")


def wait_for_rule_evaluations(server: PrometheusServer, timeout: float = 60) -> list[dict]:
    """The rule groups once every group has been evaluated at least once."""
    never = "0001-01-01T00:00:00Z"  # Go's zero time: not evaluated yet

    def evaluated() -> list[dict] | None:
        groups = server.rule_groups()
        return groups if groups and all(g["lastEvaluation"] != never for g in groups) else None

    return wait_until(
        evaluated, timeout, lambda: f"every rule group of {server.url} evaluated; log:\n{server.log}"
    )
