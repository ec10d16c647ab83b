"""Prometheus metrics of `run`: the top-K of patterns (hysteresis, bounded series), the
metrics as a scrape shows them, the HTTP server, and the real `stream-miner run` scraped over
HTTP while it follows a file (with bad lines and duplicates), before and after a restart."""

from __future__ import annotations

import json
import random
import re
import socket
import time
import urllib.error
import urllib.request
from dataclasses import replace
from fractions import Fraction

import pytest
from prometheus_client.parser import text_string_to_metric_families

from processes import stream_miner, wait_until
from stream_miner.cli.main import main
from stream_miner.connectors.http_server import HttpServer
from stream_miner.decoding.records import REASONS
from stream_miner.drift.events import ACTIVE, FALLING, RISING, PatternStatus
from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.rules import RuleFilter
from stream_miner.engine.window import CountWindow
from stream_miner.metrics import MAX_TOP_K, RunMetrics, TopPatterns
from stream_miner.runtime.protocols import TickReport
from stream_miner.runtime.runner import RunFigures

N = 1000  # baskets in the window of the hand-made patterns


def status(name: str, count: int, state: str = ACTIVE) -> PatternStatus:
    return PatternStatus((name, "z"), state, count, N, 0.5, 1.5)


def names(top: TopPatterns) -> list[str]:
    return [p.items[0] for p in top.members]


# ------------------------------------------------------------------ top-K with hysteresis
def test_a_newcomer_displaces_the_weakest_member_only_beyond_the_margin():
    top = TopPatterns(k=2, margin=Fraction(1, 10))
    top.update([status("a", 100), status("b", 50), status("c", 40)])
    assert names(top) == ["a", "b"]  # free places go to the strongest
    top.update([status("a", 100), status("b", 50), status("c", 55)])  # c beats b by exactly 10%
    assert names(top) == ["a", "b"]
    top.update([status("a", 100), status("b", 50), status("c", 56)])  # by more than 10%
    assert names(top) == ["a", "c"]
    top.update([status("a", 100), status("b", 60), status("c", 56)])  # b back above c: within the margin
    assert names(top) == ["a", "c"]
    assert [p.count for p in top.members] == [100, 56]  # members carry their latest figures


def test_members_that_stop_being_active_leave_and_free_places_are_filled():
    top = TopPatterns(k=2)
    top.update([status("a", 100), status("b", 90), status("c", 10)])
    top.update([status("a", 100, FALLING), status("b", 90, RISING), status("c", 10)])
    assert names(top) == ["a", "c"]  # falling still counts; rising does not
    top.update([status("c", 10)])  # a is gone from the tracked patterns
    assert names(top) == ["c"]
    top.update([])
    assert top.members == ()


@pytest.mark.parametrize("k", [0, MAX_TOP_K + 1])
def test_top_k_outside_its_range_is_refused(k):
    with pytest.raises(ValueError, match=f"between 1 and {MAX_TOP_K}"):
        TopPatterns(k)


@pytest.mark.parametrize("seed", range(5))
def test_series_stay_bounded_and_follow_the_members_whatever_the_data(seed):
    """Seeded random ticks of random patterns: after every tick at most K members, all of them
    eligible now with their current figures, no eligible outsider beating the weakest by more
    than the margin (or a free place left), and the pattern series exactly the members'."""
    rnd = random.Random(seed)
    k = rnd.randint(1, 8)
    margin = Fraction(1, 10)
    metrics = RunMetrics(TopPatterns(k, margin))
    universe = [f"p{i}" for i in range(40)]
    for _ in range(60):
        patterns = [
            status(name, rnd.randint(1, 200), rnd.choice((RISING, ACTIVE, FALLING)))
            for name in rnd.sample(universe, rnd.randint(0, len(universe)))
        ]
        metrics.on_tick(_report(_ticks()[0], patterns))
        members = metrics.top.members
        eligible = {p.items: p for p in patterns if p.state in (ACTIVE, FALLING)}
        assert len(members) <= k
        assert all(eligible.get(p.items) == p for p in members)
        outsiders = [p for items, p in eligible.items() if items not in {m.items for m in members}]
        if outsiders:
            assert len(members) == k
            weakest = min(m.count for m in members)
            assert all(p.count <= weakest * (1 + margin) for p in outsiders)
        scraped = _samples(metrics.exposition()[2].decode())
        for measure in ("support", "confidence", "lift"):
            series = {dict(labels)["pattern"] for name, labels in scraped if name.endswith(measure)}
            assert series == {" + ".join(p.items) for p in members}


# ------------------------------------------------------------------ what a scrape shows
def _ticks() -> list:
    """Two real ticks of a small window: the first adds every itemset and rule, the second
    changes nothing."""
    miner = WindowMiner(CountWindow(10))
    for basket in (["tea", "scone"], ["tea", "scone", "jam"], ["tea"], ["scone", "jam"], ["tea", "scone"]):
        miner.add(basket)
    params = MiningParams(min_count=2, rules=RuleFilter(min_confidence=Fraction(1, 2)))
    return [miner.tick(params), miner.tick(params)]


def _report(tick, patterns=(), seconds=0.004) -> TickReport:
    return TickReport(tick, 5, "c4", None, None, seconds / 4, 3 * seconds / 4, (), tuple(patterns))


def _figures(**changes) -> RunFigures:
    base = RunFigures(
        consumed=90,
        given_back=10,
        duplicates=4,
        dropped_late=2,
        rejected={"invalid JSON": 3, "no items": 1},
        rejected_given_back={"invalid JSON": 1},
        ticks=7,
        emerged=5,
        faded=2,
        watermark=None,
        checkpointed_at=None,
        lag={},
    )
    return replace(base, **changes)


def _samples(text: str) -> dict[tuple[str, tuple], float]:
    return {
        (sample.name, tuple(sorted(sample.labels.items()))): sample.value
        for family in text_string_to_metric_families(text)
        for sample in family.samples
    }


def test_counters_are_the_loops_counts_and_only_grow_over_a_give_back():
    metrics = RunMetrics(TopPatterns())
    figures = _figures()
    metrics.watch(lambda: figures)
    value = metrics.registry.get_sample_value
    assert value("stream_miner_transactions_total") == 100  # consumed 90 + 10 given back
    assert value("stream_miner_transactions_given_back_total") == 10
    assert value("stream_miner_input_rejected_total", {"reason": "invalid JSON"}) == 4  # 3 + 1 given back
    assert value("stream_miner_input_rejected_given_back_total", {"reason": "invalid JSON"}) == 1
    assert value("stream_miner_input_rejected_total", {"reason": "no items"}) == 1
    assert all(value("stream_miner_input_rejected_total", {"reason": r}) is not None for r in REASONS)
    assert value("stream_miner_duplicates_total") == 4
    assert value("stream_miner_late_dropped_total") == 2
    assert value("stream_miner_ticks_total") == 7
    assert value("stream_miner_patterns_emerged_total") == 5
    assert value("stream_miner_patterns_faded_total") == 2
    for absent in ("watermark_delay_seconds", "checkpoint_age_seconds", "window_transactions"):
        assert value(f"stream_miner_{absent}") is None  # unknown yet: no series, not a made-up 0
    back = {"invalid JSON": 2}
    figures = _figures(consumed=80, given_back=20, rejected=back, rejected_given_back=back)
    assert value("stream_miner_transactions_total") == 100
    assert value("stream_miner_input_rejected_total", {"reason": "invalid JSON"}) == 4


def test_wall_clock_gauges_lag_and_tick_figures():
    metrics = RunMetrics(TopPatterns(k=2))
    before = time.time()
    figures = _figures(watermark=before - 120, checkpointed_at=before - 30, lag={0: 5, 3: 0})
    metrics.watch(lambda: figures)
    first, second = _ticks()
    patterns = [status("a", 300), status("b", 200, FALLING), status("c", 100), status("d", 400, RISING)]
    metrics.on_tick(_report(first, patterns, seconds=0.004))
    value = metrics.registry.get_sample_value
    delay, age = value("stream_miner_watermark_delay_seconds"), value("stream_miner_checkpoint_age_seconds")
    after = time.time()
    assert 120 <= delay <= 120 + after - before
    assert value("stream_miner_last_checkpoint_timestamp_seconds") == before - 30
    assert 30 <= age <= 30 + after - before
    assert value("stream_miner_consumer_lag_messages", {"partition": "0"}) == 5
    assert value("stream_miner_consumer_lag_messages", {"partition": "3"}) == 0
    assert value("stream_miner_window_transactions") == 5
    assert value("stream_miner_frequent_itemsets") == len(first.result.itemsets)
    assert value("stream_miner_rules") == len(first.result.rules) > 0
    assert value("stream_miner_rule_churn") == len(first.result.rules)  # all new at tick 0
    assert value("stream_miner_patterns_active") == 3  # active or falling
    assert before <= value("stream_miner_last_tick_timestamp_seconds") <= after
    assert value("stream_miner_tick_duration_seconds_count") == 1
    assert value("stream_miner_tick_duration_seconds_bucket", {"le": "0.005"}) == 1
    assert value("stream_miner_tick_duration_seconds_bucket", {"le": "0.0025"}) == 0
    assert value("stream_miner_pattern_support", {"pattern": "a + z"}) == 0.3
    assert value("stream_miner_pattern_lift", {"pattern": "b + z"}) == 1.5
    assert value("stream_miner_pattern_confidence", {"pattern": "c + z"}) is None  # beyond K = 2
    metrics.on_tick(_report(second, [status("b", 200), status("c", 100)]))
    assert value("stream_miner_rule_churn") == 0
    assert value("stream_miner_pattern_support", {"pattern": "a + z"}) is None  # left: series removed
    assert value("stream_miner_pattern_support", {"pattern": "c + z"}) == 0.1


# ------------------------------------------------------------------ the HTTP server
def _get(url: str) -> tuple[int, str, str]:
    try:
        with urllib.request.urlopen(url, timeout=10) as answer:
            return answer.status, answer.headers["Content-Type"], answer.read().decode()
    except urllib.error.HTTPError as error:
        return error.code, error.headers["Content-Type"], error.read().decode()


def test_server_answers_its_routes_404_elsewhere_and_500_in_one_line():
    def broken() -> tuple[int, str, bytes]:
        raise RuntimeError("no figures")

    metrics = RunMetrics(TopPatterns())
    server = HttpServer("127.0.0.1", 0, {"/metrics": metrics.exposition, "/broken": broken})
    try:
        code, kind, body = _get(server.url("/metrics?x=1"))
        assert code == 200 and kind.startswith("text/plain; version=")
        assert "# TYPE stream_miner_tick_duration_seconds histogram" in body
        assert _get(server.url("/"))[0] == 404
        assert _get(server.url("/metricsx"))[0] == 404
        assert _get(server.url("/broken")) == (500, "text/plain; charset=utf-8", "RuntimeError: no figures\n")
    finally:
        server.close()
    with pytest.raises(urllib.error.URLError):
        urllib.request.urlopen(server.url("/metrics"), timeout=5)


# ------------------------------------------------------------------ the real `run`
BASKETS, WINDOW, TICK_EVERY = 300, 250, 100
BAD = {
    "invalid JSON": ["{not json", '{"id": "x", "items": ['],
    "not a JSON object": ["[1, 2]"],
    "no items": ['{"id": "n1"}', '{"id": "n2", "basket": ["tea"]}'],
}


def write_stream(path, *, seed=11) -> dict:
    """``BASKETS`` baskets with ids, every 15th followed by a repeat of an earlier one still in
    the window, and the ``BAD`` lines spread among them; returns what the file holds."""
    rnd = random.Random(seed)
    goods = [f"g{i}" for i in range(12)]
    bad = [(reason, line) for reason, lines in BAD.items() for line in lines]
    lines, duplicates = [], 0
    for i in range(BASKETS):
        lines.append(json.dumps({"id": f"c{i}", "items": rnd.sample(goods, rnd.randint(1, 4))}))
        if i % 15 == 14:
            lines.append(json.dumps({"id": f"c{i - 3}", "items": ["g0"]}))
            duplicates += 1
        if i % 50 == 20 and bad:
            lines.append(bad.pop()[1])
    assert not bad
    path.write_text("\n".join(lines) + "\n")
    rejected = {reason: len(lines_) for reason, lines_ in BAD.items()}
    return {"lines": len(lines), "baskets": BASKETS, "duplicates": duplicates, "rejected": rejected}


def scrape(url: str) -> dict[tuple[str, tuple], float]:
    with urllib.request.urlopen(url, timeout=10) as answer:
        return _samples(answer.read().decode())


def value(samples, name, **labels) -> float | None:
    return samples.get((name, tuple(sorted(labels.items()))))


def rejected_by_reason(samples) -> dict[str, int]:
    return {
        dict(labels)["reason"]: int(n)
        for (name, labels), n in samples.items()
        if name == "stream_miner_input_rejected_total" and n
    }


def settled(url: str, lines: int, window: int):
    """A scrape once every line of the file is accounted for and the tick after the last
    basket has ended (the window gauge shows the full window); None before."""
    samples = scrape(url)
    accepted, duplicates = (value(samples, f"stream_miner_{n}_total") for n in ("transactions", "duplicates"))
    if accepted is None or duplicates is None:
        return None  # scraped before the run loop was made (the server listens first)
    taken = accepted + duplicates + sum(rejected_by_reason(samples).values())
    full = value(samples, "stream_miner_window_transactions") == window
    return samples if taken == lines and full else None


SUMMARY = re.compile(r"^stream-miner: (\d+) baskets in the stream; (\d+) ticks(.*)$", re.M)


def summary_counts(stderr: str) -> tuple[int, int, int, dict[str, int]]:
    """Baskets, ticks, duplicates and dead letters by reason from the closing summary line."""
    found = SUMMARY.search(stderr)
    assert found, stderr
    rest = found.group(3)
    duplicates = re.search(r"; (\d+) duplicates skipped", rest)
    letters = re.search(r"; dead letters: ([^;]*)", rest)
    by_reason = {}
    if letters:
        for part in letters.group(1).split(", "):
            reason, n = part.rsplit(" ", 1)
            by_reason[reason] = int(n)
    return int(found.group(1)), int(found.group(2)), int(duplicates.group(1)) if duplicates else 0, by_reason


def start_run(spawn, data, *more):
    options = f"--follow --window-size {WINDOW} --tick-every {TICK_EVERY} --min-support 0.05 --metrics-port 0"
    child = spawn(stream_miner("run", "--source", f"file:{data}", *options.split(), *more))
    url = child.wait_for_line(r"^stream-miner: metrics on (http://127\.0\.0\.1:\d+/metrics)$").group(1)
    return child, url


def test_run_serves_exact_counts_while_following_a_file_and_its_summary_agrees(tmp_path, spawn):
    data = tmp_path / "checkouts.jsonl"
    held = write_stream(data)
    child, url = start_run(spawn, data)
    samples = wait_until(lambda: settled(url, held["lines"], WINDOW), what="every line counted", child=child)
    assert value(samples, "stream_miner_transactions_total") == held["baskets"]
    assert value(samples, "stream_miner_transactions_given_back_total") == 0
    assert value(samples, "stream_miner_duplicates_total") == held["duplicates"] > 0
    assert rejected_by_reason(samples) == held["rejected"]
    assert value(samples, "stream_miner_window_transactions") == WINDOW
    assert value(samples, "stream_miner_ticks_total") == BASKETS // TICK_EVERY
    assert value(samples, "stream_miner_tick_duration_seconds_count") == BASKETS // TICK_EVERY
    assert value(samples, "stream_miner_frequent_itemsets") > 0
    assert value(samples, "stream_miner_patterns_emerged_total") == 0  # no drift detection yet
    assert value(samples, "stream_miner_last_checkpoint_timestamp_seconds") is None  # no --checkpoint-dir
    err = child.stop()
    baskets, ticks, duplicates, letters = summary_counts(err)
    assert baskets == value(samples, "stream_miner_transactions_total")
    assert ticks == value(samples, "stream_miner_ticks_total")
    assert duplicates == value(samples, "stream_miner_duplicates_total")
    assert letters == rejected_by_reason(samples)
    with pytest.raises(urllib.error.URLError):
        urllib.request.urlopen(url, timeout=5)  # closed with the run


def test_counters_carry_on_from_the_checkpoint_after_a_restart(tmp_path, spawn):
    data = tmp_path / "checkouts.jsonl"
    held = write_stream(data)
    lines = data.read_text().splitlines(keepends=True)
    data.write_text("".join(lines[: len(lines) // 2]))
    checkpoints = tmp_path / "ck"
    started = time.time()
    options = f"--window-size {WINDOW} --tick-every {TICK_EVERY} --checkpoint-dir {checkpoints} --quiet"
    assert main(["run", "--source", f"file:{data}", *options.split()]) == 0
    with data.open("a") as stream:
        stream.write("".join(lines[len(lines) // 2 :]))
    child, url = start_run(spawn, data, "--checkpoint-dir", str(checkpoints))
    samples = wait_until(lambda: settled(url, held["lines"], WINDOW), what="every line counted", child=child)
    assert value(samples, "stream_miner_transactions_total") == held["baskets"]
    assert value(samples, "stream_miner_duplicates_total") == held["duplicates"]
    assert rejected_by_reason(samples) == held["rejected"]
    assert started <= value(samples, "stream_miner_last_checkpoint_timestamp_seconds") <= time.time()
    err = child.stop()
    assert "resumed from" in err
    baskets, ticks, duplicates, letters = summary_counts(err)
    assert (baskets, duplicates, letters) == (held["baskets"], held["duplicates"], held["rejected"])
    assert ticks == value(samples, "stream_miner_ticks_total")


def test_a_port_in_use_is_a_one_line_error(tmp_path, capsys):
    data = tmp_path / "checkouts.jsonl"
    write_stream(data)
    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen()
        port = taken.getsockname()[1]
        options = f"--window-size 10 --tick-every 10 --metrics-port {port}"
        code = main(["run", "--source", f"file:{data}", *options.split()])
    err = capsys.readouterr().err
    assert code == 2 and err.count("\n") == 1, err
    assert err.startswith(f"stream-miner: error: --metrics-port {port}: cannot listen on 127.0.0.1 (")
    assert "reading" not in err


@pytest.mark.parametrize(
    "options, message",
    [
        (["--metrics-port", "0", "--metrics-top-k", "101"], "--metrics-top-k 101: at most 100 patterns"),
        (["--metrics-top-k", "5"], "--metrics-top-k needs --metrics-port"),
        (["--metrics-host", "0.0.0.0"], "--metrics-host needs --metrics-port"),
    ],
)
def test_metrics_options_are_checked_in_one_line(tmp_path, capsys, options, message):
    data = tmp_path / "checkouts.jsonl"
    write_stream(data)
    code = main(["run", "--source", f"file:{data}", "--window-size", "10", "--tick-every", "10", *options])
    err = capsys.readouterr().err
    assert code == 2 and err.startswith(f"stream-miner: error: {message}") and err.count("\n") == 1, err


def test_a_scale_out_member_says_whether_it_aggregates_and_counts_incomplete_ticks():
    metrics = RunMetrics(TopPatterns())
    figures = _figures()
    metrics.watch(lambda: figures)
    value = metrics.registry.get_sample_value
    assert value("stream_miner_aggregating") is None  # a single process has no such series
    figures = _figures(aggregating=True, incomplete=3)
    assert value("stream_miner_aggregating") == 1 and value("stream_miner_ticks_incomplete_total") == 3
    figures = _figures(aggregating=False, incomplete=3)
    assert value("stream_miner_aggregating") == 0 and value("stream_miner_ticks_incomplete_total") == 3
