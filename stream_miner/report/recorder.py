"""A tick listener that keeps what a backtest report shows, in memory bounded whatever the
length of the replay.

- **Ticks** are sampled: every ``every``-th tick (by number) is kept, and ``every`` doubles,
  thinning what was kept, whenever more than ``max_points`` would be kept; ticks with events
  are always kept. So a million ticks keep between ``max_points / 2`` and ``max_points``.
- **Patterns**: series of support and lift at the sampled ticks for at most ``max_followed``
  patterns. A pattern is followed when there is room; once full, a newcomer displaces the
  weakest followed pattern (by peak support) only when its support is higher, and a pattern
  with an event displaces it in any case. Patterns with events are never displaced.
- **Events**: the first ``max_events`` are kept whole; later ones are counted only.
- **Tick times**: count, sum and maximum over every tick (exact); median and 90th percentile
  over the sampled ticks.
"""

from __future__ import annotations

import math
from collections import Counter
from dataclasses import dataclass, field

from stream_miner.drift.events import Names, PatternStatus
from stream_miner.runtime.protocols import TickReport

MAX_POINTS = 1000
MAX_FOLLOWED = 100
MAX_EVENTS = 5000
TICK_COLUMNS = ("tick", "baskets", "window", "itemsets", "active", "seconds", "end_time")
POINT_COLUMNS = ("tick", "baskets", "support", "lift")


@dataclass
class Series:
    """One followed pattern: its points (``POINT_COLUMNS``), peak support, latest state and
    the ids of its events."""

    items: Names
    points: list[tuple[int, int, float, float | None]] = field(default_factory=list)
    peak: float = 0.0
    state: str = ""
    events: list[str] = field(default_factory=list)


class BacktestRecorder:
    """Records every tick of a replay (a :class:`~stream_miner.runtime.protocols.TickListener`)."""

    def __init__(
        self, *, max_points: int = MAX_POINTS, max_followed: int = MAX_FOLLOWED, max_events: int = MAX_EVENTS
    ) -> None:
        if min(max_points, max_followed, max_events) < 1:
            raise ValueError("the recorder's caps must be at least 1")
        self.max_points = max_points
        self.max_followed = max_followed
        self.max_events = max_events
        self.every = 1  # ticks kept: numbers divisible by this (and ticks with events)
        self.ticks: list[tuple] = []  # rows of TICK_COLUMNS
        self.followed: dict[Names, Series] = {}
        self.events: list[dict] = []
        self.events_left_out = 0
        self.kinds: Counter[str] = Counter()
        self.event_ticks: set[int] = set()
        self.tick_count = 0
        self.seconds_total = 0.0
        self.seconds_max = 0.0
        self.last_patterns: tuple[PatternStatus, ...] = ()
        self.last: TickReport | None = None
        self._kept = 0  # kept ticks divisible by ``every``

    def on_tick(self, report: TickReport) -> None:
        """Take one tick. O(events) on most ticks; O(patterns + followed) on sampled ones."""
        number = report.tick.number
        seconds = report.window_update_seconds + report.refresh_seconds
        self.tick_count += 1
        self.seconds_total += seconds
        self.seconds_max = max(self.seconds_max, seconds)
        self.last, self.last_patterns = report, report.patterns
        moved = {event.items: event.id for event in report.events}
        for event in report.events:
            self.kinds[event.kind] += 1
            if len(self.events) < self.max_events:
                self.events.append(
                    event.as_json() | {"baskets": report.consumed, "window_start": report.window_start}
                )
                self.event_ticks.add(number)
            else:
                self.events_left_out += 1
        sampled = number % self.every == 0
        if not (sampled or number in self.event_ticks):
            return
        result = report.tick.result
        active = sum(1 for p in report.patterns if p.state != "rising")
        row = (
            number,
            report.consumed,
            result.n_baskets,
            len(result.itemsets),
            active,
            seconds,
            report.window_end,
        )
        self.ticks.append(row)
        self._follow(report, moved, everyone=sampled)
        for items, event_id in moved.items():
            if items in self.followed:
                self.followed[items].events.append(event_id)
        if sampled:
            self._kept += 1
            if self._kept > self.max_points:
                self._thin()

    def _follow(self, report: TickReport, moved: dict[Names, str], *, everyone: bool) -> None:
        """Add this tick's point to the followed patterns (all of them when ``everyone``, else
        those with events); newcomers enter as the class docstring says."""
        full = False  # once a newcomer without an event is refused, later (weaker) ones are too
        for pattern in report.patterns:
            forced = pattern.items in moved
            if not (everyone or forced):
                continue
            series = self.followed.get(pattern.items)
            if series is None:
                if full and not forced:
                    continue
                series = self._admit(pattern, forced)
                if series is None:
                    full = True
                    continue
            support = pattern.support
            lift = pattern.lift if math.isfinite(pattern.lift) else None
            series.points.append((report.tick.number, report.consumed, support, lift))
            series.peak = max(series.peak, support)
            series.state = pattern.state

    def _admit(self, pattern: PatternStatus, forced: bool) -> Series | None:
        if len(self.followed) >= self.max_followed:
            candidates = [s for s in self.followed.values() if not s.events]
            if not candidates:
                return None
            weakest = min(candidates, key=lambda s: (s.peak, s.items))
            if not forced and pattern.support <= weakest.peak:
                return None
            del self.followed[weakest.items]
        series = self.followed[pattern.items] = Series(pattern.items)
        return series

    def _thin(self) -> None:
        """Double ``every`` and drop what it no longer keeps."""
        self.every *= 2

        def keep(tick: int) -> bool:
            return tick % self.every == 0 or tick in self.event_ticks

        self.ticks = [row for row in self.ticks if keep(row[0])]
        for series in self.followed.values():
            series.points = [point for point in series.points if keep(point[0])]
        self._kept = sum(1 for row in self.ticks if row[0] % self.every == 0)

    def tick_seconds(self) -> dict[str, float | None]:
        """Seconds per tick (window update plus refresh): exact mean and maximum, median and
        90th percentile of the sampled ticks."""
        if not self.tick_count:
            return {"mean": None, "max": None, "median": None, "p90": None}
        ordered = sorted(row[5] for row in self.ticks)
        return {
            "mean": self.seconds_total / self.tick_count,
            "max": self.seconds_max,
            "median": ordered[len(ordered) // 2],
            "p90": ordered[int(0.9 * (len(ordered) - 1))],
        }

    def chosen(self, k: int) -> list[Series]:
        """The ``k`` series to chart: patterns with events first (by their first event),
        then the others by how long they were tracked (points kept), then peak support."""
        order = {event["id"]: i for i, event in enumerate(self.events)}
        with_events = [s for s in self.followed.values() if s.events]
        with_events.sort(key=lambda s: (min(order.get(e, math.inf) for e in s.events), s.items))
        others = sorted(
            (s for s in self.followed.values() if not s.events),
            key=lambda s: (-len(s.points), -s.peak, s.items),
        )
        return (with_events + others)[:k]
