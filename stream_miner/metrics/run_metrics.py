"""The run's Prometheus metrics, in a registry of their own.

:class:`RunMetrics` is a tick listener and a custom collector at once. Counts come from the
run loop at scrape time (:meth:`~stream_miner.runtime.runner.Runner.figures`, one consistent
set taken under the loop's lock), so the counters equal the loop's own counts, which a
restart restores from the checkpoint. What a tick found (window, itemsets, rules, patterns)
is kept as an immutable snapshot that each tick replaces: the scrape, on the HTTP server's
thread, reads whole snapshots only. Per-pattern series are generated afresh at every scrape
from the :class:`~stream_miner.metrics.top_patterns.TopPatterns` members, so a pattern that
leaves the top K leaves no stale series behind.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass

from prometheus_client import CONTENT_TYPE_LATEST, CollectorRegistry, Histogram, generate_latest
from prometheus_client.core import CounterMetricFamily, GaugeMetricFamily, Metric

from stream_miner.decoding.records import REASONS
from stream_miner.drift.events import PatternStatus
from stream_miner.metrics.top_patterns import ELIGIBLE, TopPatterns
from stream_miner.runtime.protocols import TickReport
from stream_miner.runtime.runner import RunFigures

PREFIX = "stream_miner_"
TICK_BUCKETS = (0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0, 30.0, 60.0)
PATTERN_JOIN = " + "  # a pattern's label value: its item names joined by this


@dataclass(frozen=True)
class _TickFigures:
    """What the last tick found, and when it ended (wall clock)."""

    window: int
    itemsets: int
    rules: int
    churn: int
    active: int
    ended_at: float
    top: tuple[PatternStatus, ...]


class RunMetrics:
    """Metrics of one ``run``: register with the run loop as a listener, then :meth:`watch`
    the loop's figures; expose :attr:`registry`."""

    def __init__(self, top: TopPatterns, registry: CollectorRegistry | None = None) -> None:
        self.registry = registry or CollectorRegistry()
        self.top = top
        self.tick_duration = Histogram(
            PREFIX + "tick_duration_seconds",
            "Seconds per tick: applying the baskets to the window and refreshing the result.",
            buckets=TICK_BUCKETS,
            registry=self.registry,
        )
        self._figures: Callable[[], RunFigures] | None = None
        self._last: _TickFigures | None = None  # replaced whole by each tick, never changed
        self.registry.register(self)

    def watch(self, figures: Callable[[], RunFigures]) -> None:
        """Read the run loop's counts from ``figures()`` at every scrape (callable from any thread)."""
        self._figures = figures

    def on_tick(self, report: TickReport) -> None:
        """Note one tick (on the run loop's thread)."""
        self.tick_duration.observe(report.window_update_seconds + report.refresh_seconds)
        self.top.update(report.patterns)
        result, delta = report.tick.result, report.tick.delta
        self._last = _TickFigures(
            window=result.n_baskets,
            itemsets=len(result.itemsets),
            rules=len(result.rules),
            churn=len(delta.rules_added) + len(delta.rules_removed),
            active=sum(p.state in ELIGIBLE for p in report.patterns),
            ended_at=time.time(),
            top=self.top.members,
        )

    def exposition(self) -> tuple[int, str, bytes]:
        """Every metric in Prometheus's text format: an HTTP route's status, content type, body."""
        return 200, CONTENT_TYPE_LATEST, generate_latest(self.registry)

    def collect(self) -> Iterator[Metric]:
        """Every metric but the histogram, as of now (called by the registry at a scrape)."""
        now = time.time()
        if self._figures is not None:
            yield from _loop_metrics(self._figures(), now)
        tick = self._last
        if tick is not None:
            yield from _tick_metrics(tick)


def _loop_metrics(figures: RunFigures, now: float) -> Iterator[Metric]:
    yield _counter("transactions", "Baskets accepted into the window.", figures.consumed + figures.given_back)
    yield _counter(
        "transactions_given_back",
        "Baskets handed back to another consumer group member (accepted, then uncounted here).",
        figures.given_back,
    )
    rejected = CounterMetricFamily(
        PREFIX + "input_rejected", "Records set aside as dead letters, by reason.", labels=["reason"]
    )
    given_back = CounterMetricFamily(
        PREFIX + "input_rejected_given_back",
        "Dead letters handed back to another consumer group member, by reason.",
        labels=["reason"],
    )
    for reason in sorted(REASONS.keys() | figures.rejected.keys()):
        back = figures.rejected_given_back.get(reason, 0)
        rejected.add_metric([reason], figures.rejected.get(reason, 0) + back)
        given_back.add_metric([reason], back)
    yield rejected
    yield given_back
    yield _counter("duplicates", "Baskets skipped as repeats of a basket id seen before.", figures.duplicates)
    yield _counter("late_dropped", "Baskets dropped as too late (--late drop).", figures.dropped_late)
    yield _counter("ticks", "Ticks: refreshes of the frequent itemsets and rules.", figures.ticks)
    yield _counter("patterns_emerged", "Drift events: patterns that emerged.", figures.emerged)
    yield _counter("patterns_faded", "Drift events: patterns that faded.", figures.faded)
    if figures.watermark is not None:
        yield _gauge(
            "watermark_delay_seconds",
            "Wall-clock time now minus the event-time window's watermark.",
            now - figures.watermark,
        )
    if figures.aggregating is not None:
        yield _gauge(
            "aggregating",
            "1 while this member of a scale-out run is the elected aggregator, else 0.",
            int(figures.aggregating),
        )
        yield _counter(
            "ticks_incomplete",
            "Scale-out ticks this member closed as incomplete while aggregating (nothing published).",
            figures.incomplete,
        )
    lag = GaugeMetricFamily(
        PREFIX + "consumer_lag_messages",
        "Kafka: high watermark minus the consumer's position, per assigned partition.",
        labels=["partition"],
    )
    for partition, behind in sorted(figures.lag.items()):
        lag.add_metric([str(partition)], behind)
    yield lag
    if figures.checkpointed_at is not None:
        yield _gauge(
            "last_checkpoint_timestamp_seconds",
            "Wall-clock time the last checkpoint was written (Unix seconds).",
            figures.checkpointed_at,
        )
        yield _gauge(
            "checkpoint_age_seconds",
            "Seconds since the last checkpoint was written.",
            now - figures.checkpointed_at,
        )


def _tick_metrics(tick: _TickFigures) -> Iterator[Metric]:
    yield _gauge("window_transactions", "Baskets in the window at the last tick.", tick.window)
    yield _gauge("frequent_itemsets", "Frequent itemsets at the last tick.", tick.itemsets)
    yield _gauge("rules", "Association rules at the last tick.", tick.rules)
    yield _gauge("rule_churn", "Rules added plus rules removed at the last tick.", tick.churn)
    yield _gauge("patterns_active", "Tracked patterns in state active or falling.", tick.active)
    yield _gauge(
        "last_tick_timestamp_seconds", "Wall-clock time the last tick ended (Unix seconds).", tick.ended_at
    )
    measures = {
        "support": ("Support of a top pattern (share of the window's baskets).", lambda p: p.support),
        "confidence": ("Confidence of a top pattern's best rule.", lambda p: p.confidence),
        "lift": ("Lift of a top pattern's best rule.", lambda p: p.lift),
    }
    for name, (documentation, measure) in measures.items():
        family = GaugeMetricFamily(PREFIX + "pattern_" + name, documentation, labels=["pattern"])
        for pattern in tick.top:
            family.add_metric([PATTERN_JOIN.join(pattern.items)], measure(pattern))
        yield family


def _counter(name: str, documentation: str, value: int) -> CounterMetricFamily:
    return CounterMetricFamily(PREFIX + name, documentation, value=value)


def _gauge(name: str, documentation: str, value: float) -> GaugeMetricFamily:
    return GaugeMetricFamily(PREFIX + name, documentation, value=value)
