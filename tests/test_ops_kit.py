"""``stream-miner ops-kit`` and the operations files it writes, checked with the real
``promtool`` and a real Prometheus server (tests/prometheus_server.py).

The alerts' logic is covered here by ``promtool test rules``, whose unit tests are shown to
fail when any alert's expression or hold time changes; the firing path end to end (a real
``run --metrics-port`` scraped by Prometheus) is tests/test_prometheus_end_to_end.py.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import subprocess
from importlib import resources
from pathlib import Path

import pytest
import yaml

from prometheus_server import binary, wait_for_rule_evaluations
from stream_miner.cli.main import main
from stream_miner.cli.ops_kit import KIT

# The metric names `run --metrics-port` exposes (issue 10); nothing else may be queried.
COUNTERS = {
    "stream_miner_transactions_total",
    "stream_miner_transactions_given_back_total",
    "stream_miner_input_rejected_total",
    "stream_miner_duplicates_total",
    "stream_miner_late_dropped_total",
    "stream_miner_ticks_total",
    "stream_miner_patterns_emerged_total",
    "stream_miner_patterns_faded_total",
}
GAUGES = {
    "stream_miner_window_transactions",
    "stream_miner_frequent_itemsets",
    "stream_miner_rules",
    "stream_miner_rule_churn",
    "stream_miner_patterns_active",
    "stream_miner_last_tick_timestamp_seconds",
    "stream_miner_watermark_delay_seconds",
    "stream_miner_consumer_lag_messages",
    "stream_miner_last_checkpoint_timestamp_seconds",
    "stream_miner_checkpoint_age_seconds",
    "stream_miner_pattern_support",
    "stream_miner_pattern_confidence",
    "stream_miner_pattern_lift",
}
HISTOGRAM = "stream_miner_tick_duration_seconds"
SERIES = COUNTERS | GAUGES | {f"{HISTOGRAM}_{part}" for part in ("bucket", "sum", "count")}
TARGET_HEALTH = "up"  # Prometheus's own series per scrape target (the StreamMinerDown alert)

FUNCTIONS = {"rate", "increase", "sum", "max", "topk", "histogram_quantile", "time"}
OPERATORS = {"and", "or", "unless", "bool", "offset"}
# Grafana's variables, replaced before a dashboard query goes to Prometheus
GRAFANA_VARIABLES = {"$__rate_interval": "1m", "$job": ".*", "$instance": ".*"}


def metric_names(expr: str) -> set[str]:
    """The metric names a PromQL expression selects: what is left once strings, label
    matchers, ranges, grouping clauses, functions and operators are taken out."""
    expr = re.sub(r'"(?:[^"\\]|\\.)*"', '""', expr)
    expr = re.sub(r"\{[^{}]*\}|\[[^\[\]]*\]", " ", expr)
    expr = re.sub(r"\b(?:by|without|on|ignoring|group_left|group_right)\s*\([^()]*\)", " ", expr)
    names = set()
    for word in re.finditer(r"[A-Za-z_:][A-Za-z0-9_:]*", expr):
        called = expr[word.end() :].lstrip().startswith("(")
        if called:
            assert word.group() in FUNCTIONS, f"unexpected function {word.group()} in {expr}"
        elif word.group() not in OPERATORS:
            names.add(word.group())
    return names


def test_metric_names_reads_selectors_not_labels_or_functions():
    expr = 'sum by (job, le) (rate(a_total{reason="x y", job=~"$job"}[5m])) / on(job) b > 0.5 and time() - c'
    assert metric_names(expr) == {"a_total", "b", "c"}
    with pytest.raises(AssertionError, match="unexpected function"):
        metric_names("irate(a_total[5m])")


# ------------------------------------------------------------------ the command
def packaged(name: str) -> str:
    return resources.files("stream_miner.ops").joinpath(name).read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def kit(tmp_path_factory) -> Path:
    """A directory written by ``stream-miner ops-kit``."""
    out = tmp_path_factory.mktemp("kit") / "ops"
    assert main(["ops-kit", "--out", str(out)]) == 0
    return out


def load_yaml(path: Path) -> dict:
    return yaml.safe_load(path.read_text())


def test_ops_kit_writes_the_packaged_files_into_a_new_directory(tmp_path, capsys):
    out = tmp_path / "monitoring" / "stream-miner"
    old_umask = os.umask(0o022)
    try:
        assert main(["ops-kit", "--out", str(out)]) == 0
    finally:
        os.umask(old_umask)
    printed = capsys.readouterr().out.splitlines()
    assert sorted(path.name for path in out.iterdir()) == sorted(KIT)
    for name in KIT:
        assert (out / name).read_text() == packaged(name)
        # readable by a Prometheus or Grafana server running as another user
        assert (out / name).stat().st_mode & 0o777 == 0o644
    assert printed == [f"wrote {out / name}: {what}" for name, what in KIT.items()]


def test_ops_kit_replaces_nothing_without_force(tmp_path, capsys):
    assert main(["ops-kit", "--out", str(tmp_path)]) == 0
    (tmp_path / "alerts.yml").write_text("# tuned by hand\n")
    (tmp_path / "dashboard.json").unlink()
    capsys.readouterr()

    assert main(["ops-kit", "--out", str(tmp_path)]) == 2
    out, err = capsys.readouterr()
    assert out == ""
    assert err.count("\n") == 1 and err.startswith("stream-miner: error: ")
    assert "alerts.yml, alerts_test.yml, scrape.yml" in err and "--force" in err
    assert (tmp_path / "alerts.yml").read_text() == "# tuned by hand\n"
    assert not (tmp_path / "dashboard.json").exists()  # nothing written, not even a missing file

    assert main(["ops-kit", "--out", str(tmp_path), "--force"]) == 0
    for name in KIT:
        assert (tmp_path / name).read_text() == packaged(name)


@pytest.mark.parametrize("case", ["under a file", "a directory in the way"])
def test_ops_kit_reports_a_place_it_cannot_write_in_one_line(tmp_path, capsys, case):
    if case == "under a file":
        (tmp_path / "plain").write_text("")
        out, expected = tmp_path / "plain" / "ops", "cannot create it (Not a directory)"
    else:
        (tmp_path / "alerts.yml").mkdir()
        out, expected = tmp_path, "alerts.yml is a directory there, not a file"
    assert main(["ops-kit", "--out", str(out), "--force"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("stream-miner: error: --out ") and expected in err
    assert not (tmp_path / "dashboard.json").exists()


# ------------------------------------------------------------------ alerting rules
def alert_rules(kit: Path) -> list[dict]:
    return [rule for group in load_yaml(kit / "alerts.yml")["groups"] for rule in group["rules"]]


def alert_names(kit: Path) -> set[str]:
    return {rule["alert"] for rule in alert_rules(kit)}


def promtool(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([binary("promtool"), *args], capture_output=True, text=True, timeout=60)


@pytest.mark.prometheus
def test_promtool_accepts_the_rules_and_the_scrape_configuration(kit):
    rules = promtool("check", "rules", str(kit / "alerts.yml"))
    assert rules.returncode == 0, rules.stdout + rules.stderr
    assert f"SUCCESS: {len(alert_rules(kit))} rules found" in rules.stdout
    config = promtool("check", "config", str(kit / "scrape.yml"))
    assert config.returncode == 0, config.stdout + config.stderr
    assert "SUCCESS: 1 rule files found" in config.stdout


@pytest.mark.prometheus
def test_promtool_unit_tests_of_the_alerts_pass(kit):
    result = promtool("test", "rules", str(kit / "alerts_test.yml"))
    assert result.returncode == 0, result.stdout + result.stderr
    assert "SUCCESS" in result.stdout


def test_every_alert_is_unit_tested_firing_and_not_firing(kit):
    groups = load_yaml(kit / "alerts_test.yml")["tests"]
    cases = [case for group in groups for case in group["alert_rule_test"]]
    firing = {case["alertname"] for case in cases if case.get("exp_alerts")}
    quiet = {case["alertname"] for case in cases if not case.get("exp_alerts")}
    assert firing == alert_names(kit)
    assert quiet == alert_names(kit)


# (alert, text in alerts.yml, replacement): each change must make a unit test fail
MUTATIONS = [
    ("StreamMinerPatternEmerged", "emerged_total[10m]) > 0", "emerged_total[10m]) > 1"),
    ("StreamMinerPatternFaded", "faded_total[10m])", "faded_total[5m])"),
    ("StreamMinerMiningStalled", "> 900)", "> 1300)"),
    ("StreamMinerMiningStalled", "and stream_miner_last_tick_timestamp_seconds > 0", ""),
    ("StreamMinerConsumerLagHigh", "> 10000", "> 30000"),
    ("StreamMinerConsumerLagHigh", "for: 10m", "for: 1m"),
    ("StreamMinerDeadLetterSurge", ") > 0.05", ") > 0.1"),
    ("StreamMinerDeadLetterSurge", ">= 10", ">= 4"),
    ("StreamMinerDown", 'up{job="stream-miner"} == 0', "up == 0"),
]


@pytest.mark.prometheus
@pytest.mark.parametrize(("alert", "text", "replacement"), MUTATIONS, ids=lambda v: str(v)[:24])
def test_the_unit_tests_fail_when_an_alert_changes(tmp_path, kit, alert, text, replacement):
    rules = (kit / "alerts.yml").read_text()
    assert rules.count(text) == 1
    (tmp_path / "alerts.yml").write_text(rules.replace(text, replacement))
    shutil.copy(kit / "alerts_test.yml", tmp_path)
    result = promtool("test", "rules", str(tmp_path / "alerts_test.yml"))
    assert result.returncode != 0, result.stdout
    assert f"alertname: {alert}," in result.stdout + result.stderr


def test_every_alert_holds_before_firing_and_says_what_to_do(kit):
    rules = alert_rules(kit)
    assert {rule["alert"] for rule in rules} >= {
        "StreamMinerPatternEmerged",
        "StreamMinerPatternFaded",
        "StreamMinerMiningStalled",
        "StreamMinerConsumerLagHigh",
        "StreamMinerDeadLetterSurge",
    }
    for rule in rules:
        assert re.fullmatch(r"[1-9][0-9]*[sm]", rule["for"]), rule
        assert rule["labels"]["severity"] in {"info", "warning", "critical"}, rule
        assert rule["annotations"]["summary"] and "\n" not in rule["annotations"]["summary"], rule
        assert "Runbook:" in rule["annotations"]["description"], rule


def panel_queries(dashboard: dict) -> list[str]:
    """The PromQL expressions of the dashboard's panels."""
    return [target["expr"] for panel in dashboard["panels"] for target in panel.get("targets", [])]


def dashboard_queries(dashboard: dict) -> list[str]:
    """Every PromQL expression of the dashboard: panel targets, annotations, and the metric
    selectors of its ``label_values`` variables."""
    queries = panel_queries(dashboard)
    queries += [a["expr"] for a in dashboard["annotations"]["list"] if "expr" in a]
    for variable in dashboard["templating"]["list"]:
        if variable["type"] == "query":
            selector = re.fullmatch(r"label_values\((.+), *\w+\)", variable["definition"])
            assert selector, variable["definition"]
            queries.append(selector.group(1))
    return queries


def test_every_expression_names_only_the_metrics_of_run(kit):
    for rule in alert_rules(kit):
        allowed = SERIES | ({TARGET_HEALTH} if rule["alert"] == "StreamMinerDown" else set())
        names = metric_names(rule["expr"])
        assert names and names <= allowed, (rule["alert"], names - allowed)
    dashboard = json.loads((kit / "dashboard.json").read_text())
    for query in dashboard_queries(dashboard):
        names = metric_names(query.replace("$__rate_interval", "1m"))
        assert names and names <= SERIES, (query, names - SERIES)


# ------------------------------------------------------------------ the dashboard
def test_the_dashboard_is_importable_into_grafana(kit):
    dashboard = json.loads((kit / "dashboard.json").read_text())
    assert isinstance(dashboard["schemaVersion"], int) and dashboard["uid"] and dashboard["title"]
    variables = {v["name"]: v for v in dashboard["templating"]["list"]}
    assert variables["datasource"]["type"] == "datasource"
    assert variables["datasource"]["query"] == "prometheus"
    data_source = {"type": "prometheus", "uid": "${datasource}"}
    panels = dashboard["panels"]
    assert len({p["id"] for p in panels}) == len(panels)
    assert len({p["title"] for p in panels}) == len(panels)
    cells = set()
    for panel in panels:
        box = panel["gridPos"]
        assert box["x"] >= 0 and box["w"] > 0 and box["x"] + box["w"] <= 24, panel["title"]
        columns, lines = range(box["x"], box["x"] + box["w"]), range(box["y"], box["y"] + box["h"])
        covered = {(x, y) for x in columns for y in lines}
        assert not covered & cells, f"{panel['title']} overlaps another panel"
        cells |= covered
        if panel["type"] == "row":
            continue
        assert panel["datasource"] == data_source, panel["title"]
        assert panel["targets"] and all(t["datasource"] == data_source for t in panel["targets"])
        assert len({t["refId"] for t in panel["targets"]}) == len(panel["targets"]), panel["title"]


def test_the_dashboard_shows_what_an_operator_watches(kit):
    dashboard = json.loads((kit / "dashboard.json").read_text())
    queries = dashboard_queries(dashboard)
    shown = set().union(*(metric_names(query.replace("$__rate_interval", "1m")) for query in queries))
    assert {
        "stream_miner_transactions_total",  # throughput
        "stream_miner_window_transactions",
        f"{HISTOGRAM}_bucket",  # tick duration quantiles
        "stream_miner_patterns_active",
        "stream_miner_patterns_emerged_total",
        "stream_miner_patterns_faded_total",
        "stream_miner_pattern_lift",  # top patterns
        "stream_miner_input_rejected_total",  # rejects by reason
        "stream_miner_consumer_lag_messages",
        "stream_miner_checkpoint_age_seconds",
    } <= shown
    assert any(expr.startswith("topk(") for expr in panel_queries(dashboard) if "pattern_lift" in expr)
    quantiles = [expr for expr in panel_queries(dashboard) if "_bucket" in expr]
    assert quantiles and all(
        expr.startswith("histogram_quantile(") and re.search(r"by \([^)]*\ble\b", expr) for expr in quantiles
    )


# ------------------------------------------------------------------ a real Prometheus
@pytest.mark.prometheus
def test_a_real_prometheus_loads_every_alert(kit, prometheus):
    server = prometheus(rule_files=[kit / "alerts.yml"])
    groups = wait_for_rule_evaluations(server)
    loaded = {rule["name"]: rule for group in groups for rule in group["rules"]}
    assert set(loaded) == alert_names(kit)
    for rule in alert_rules(kit):
        served = loaded[rule["alert"]]
        assert served["type"] == "alerting" and served["health"] == "ok", served
        assert served["labels"]["severity"] == rule["labels"]["severity"]
        assert served["duration"] == int(rule["for"][:-1]) * (60 if rule["for"].endswith("m") else 1)
    assert server.alerts() == []  # nothing scraped yet: no alert is pending or firing


@pytest.mark.prometheus
def test_a_real_prometheus_accepts_every_dashboard_query(kit, prometheus):
    server = prometheus()
    dashboard = json.loads((kit / "dashboard.json").read_text())
    for query in dashboard_queries(dashboard):
        for variable, value in GRAFANA_VARIABLES.items():
            query = query.replace(variable, value)
        assert "$" not in query, query
        assert server.query(query) == []  # valid PromQL; nothing is scraped, so no series
    with pytest.raises(pytest.fail.Exception, match="bad_data"):
        server.query("rate(stream_miner_transactions_total[1m]")  # the check can fail
