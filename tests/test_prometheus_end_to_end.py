"""The alerting path end to end, every part real: ``stream-miner run --follow`` reads a file in
which a pair planted by our generator emerges, a real Prometheus server
(tests/prometheus_server.py) scrapes its ``--metrics-port`` every second with the
``alerts.yml`` that ``ops-kit`` writes, and the test reads everything back through
Prometheus's HTTP API, never from the process itself: the window gauge, the tick histogram,
the emerged counter, and ``StreamMinerPatternEmerged`` going pending, then firing once its
``for:`` has passed.

``increase()`` sees a change only between two samples, so the baskets before the change are
written first and the rest is appended (``--follow`` reads it) only once Prometheus holds a
sample of the settled state before it. The ``spawn`` and ``prometheus`` fixtures stop both
processes whatever happens.
"""

from __future__ import annotations

import json
import re
import urllib.parse
from pathlib import Path

import pytest
import yaml

from processes import stream_miner, wait_until
from prometheus_server import PrometheusServer, binary
from stream_miner.cli.main import main
from stream_miner.simulate.planted import Plant, baskets, write_jsonl

WINDOW, TICK_EVERY = 1000, 100
BEFORE, AFTER = 1500, 1500  # baskets before the planted pair appears, and from then on
PAIR = ("tea-x", "tea-y")
SEED = 3
ALERT = "StreamMinerPatternEmerged"
LONGEST_HOLD = 90  # seconds: a longer `for:` would make this test wait too long; fail instead
METRICS_LINE = r"^stream-miner: metrics on (http://127\.0\.0\.1:\d+/metrics)$"


def planted_lines(path: Path) -> list[str]:
    """The stream's JSON lines: independent base items, then ``PAIR`` in 12 % of the baskets."""
    write_jsonl(str(path), baskets(BEFORE + AFTER, [Plant(PAIR, 0.12, start=BEFORE)], seed=SEED))
    lines = path.read_text().splitlines(keepends=True)
    path.unlink()
    return lines


def latest(server: PrometheusServer, expr: str) -> float | None:
    """The value of ``expr`` now, for the job's one target (None: no series)."""
    result = server.query(expr)
    assert len(result) <= 1, result
    return float(result[0]["value"][1]) if result else None


def scraped(server: PrometheusServer, ticks: int, emerged: int) -> dict[str, float | None] | None:
    """What Prometheus holds of the target once its latest sample shows a full window after
    ``ticks`` ticks and ``emerged`` emerged patterns (at least); None before."""
    seen = {
        name: latest(server, f'{name}{{job="stream-miner"}}')
        for name in (
            "up",
            "stream_miner_window_transactions",
            "stream_miner_tick_duration_seconds_count",
            "stream_miner_ticks_total",
            "stream_miner_patterns_emerged_total",
        )
    }
    settled = (
        seen["up"] == 1
        and seen["stream_miner_window_transactions"] == WINDOW
        and seen["stream_miner_tick_duration_seconds_count"] == ticks
        and (seen["stream_miner_patterns_emerged_total"] or 0) >= emerged
    )
    return seen if settled else None


def events_of(path: Path) -> list[dict]:
    return [json.loads(line) for line in path.read_text().splitlines()] if path.exists() else []


def hold_seconds(rules: Path, alert: str) -> int:
    """The ``for:`` of ``alert`` in the rule file, in seconds."""
    groups = yaml.safe_load(rules.read_text())["groups"]
    found = [rule for group in groups for rule in group["rules"] if rule["alert"] == alert]
    assert len(found) == 1, found
    hold = re.fullmatch(r"(\d+)([sm])", found[0]["for"])
    assert hold, found
    return int(hold.group(1)) * (60 if hold.group(2) == "m" else 1)


@pytest.mark.prometheus
@pytest.mark.slow
def test_prometheus_sees_a_planted_pair_emerge_and_fires_the_alert(tmp_path, spawn, prometheus):
    binary("prometheus")  # skip (or fail when required) before starting anything
    assert main(["ops-kit", "--out", str(tmp_path / "ops")]) == 0
    rules = tmp_path / "ops" / "alerts.yml"
    hold = hold_seconds(rules, ALERT)
    assert hold <= LONGEST_HOLD, f"{ALERT} holds {hold} s before firing; this test waits {LONGEST_HOLD} s"

    lines = planted_lines(tmp_path / "whole.jsonl")
    data, events = tmp_path / "checkouts.jsonl", tmp_path / "events.jsonl"
    data.write_text("".join(lines[:BEFORE]))
    options = (
        f"--follow --window-size {WINDOW} --tick-every {TICK_EVERY} --min-support 0.05 "
        f"--min-confidence 0.5 --min-lift 1.5 --metrics-port 0 --events-out {events} --quiet"
    )
    child = spawn(stream_miner("run", "--source", f"file:{data}", *options.split()))
    target = urllib.parse.urlsplit(child.wait_for_line(METRICS_LINE).group(1)).netloc
    server = prometheus(rule_files=[rules], targets=[target])

    # before the change: Prometheus holds the full window, its ticks and no emerged pattern
    ticks_before = BEFORE // TICK_EVERY
    before = wait_until(
        lambda: scraped(server, ticks_before, 0), 60, f"{target} scraped after {ticks_before} ticks", child
    )
    assert before["stream_miner_ticks_total"] == ticks_before
    assert before["stream_miner_patterns_emerged_total"] == 0
    assert events_of(events) == []
    assert server.alerts() == []

    # the planted pair appears in the appended baskets
    with data.open("a") as stream:
        stream.write("".join(lines[BEFORE:]))
    ticks_after = (BEFORE + AFTER) // TICK_EVERY
    after = wait_until(
        lambda: scraped(server, ticks_after, 1), 60, f"{target} scraped after {ticks_after} ticks", child
    )
    assert after["stream_miner_window_transactions"] == WINDOW
    assert after["stream_miner_ticks_total"] == ticks_after
    # Prometheus's own view of the rises, as the alert computes them
    assert latest(server, 'increase(stream_miner_tick_duration_seconds_count{job="stream-miner"}[10m])') > 0
    assert latest(server, 'increase(stream_miner_patterns_emerged_total{job="stream-miner"}[10m])') > 0

    written = wait_until(lambda: events_of(events), 30, f"an event in {events}", child)
    emerged = [event for event in written if event["event"] == "emerged"]
    assert [tuple(event["items"]) for event in emerged] == [PAIR], written
    assert emerged[0]["tick"] >= ticks_before  # in the appended part, not in the warm-up
    assert after["stream_miner_patterns_emerged_total"] == len(emerged)

    pending = server.wait_for_alert(ALERT, ("pending",), timeout=30)
    assert pending["labels"] == {
        "alertname": ALERT,
        "instance": target,
        "job": "stream-miner",
        "severity": "info",
    }
    assert target in pending["annotations"]["summary"]
    firing = server.wait_for_alert(ALERT, ("firing",), timeout=hold + 30)
    assert firing["labels"] == pending["labels"] and firing["activeAt"] == pending["activeAt"]
    assert {alert["labels"]["alertname"] for alert in server.alerts()} == {ALERT}  # nothing else
    fired = latest(server, f'ALERTS{{alertname="{ALERT}", alertstate="firing"}}')
    assert fired == 1

    err = child.stop()  # SIGTERM: exit 0, asserted by stop()
    assert f"{BEFORE + AFTER} baskets in the stream; {ticks_after} ticks" in err, err
    assert "Traceback" not in err
    assert events_of(events) == written  # nothing more, nothing written twice at the stop
