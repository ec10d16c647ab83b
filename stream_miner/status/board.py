"""What the status page shows, kept by a tick listener: the window, the tracked patterns with
their recent support and lift, and the latest drift events.

History is bounded: the last ``history`` ticks per pattern (a pattern no longer tracked is
dropped with its history) and the last ``keep_events`` events. The run loop's thread writes
under a lock; the HTTP server's threads read under it and encode outside it. Only item names
leave the process: an event's basket ids (the window's first and last) are left out.

>>> board = StatusBoard(history=3)
>>> board.patterns()["tick"] is None
True
"""

from __future__ import annotations

import json
import threading
import time
from collections import deque
from collections.abc import Iterable
from dataclasses import dataclass

from stream_miner.drift.events import DriftEvent, Names, PatternStatus
from stream_miner.runtime.protocols import TickReport

JSON = "application/json; charset=utf-8"
DEFAULT_HISTORY = 60  # ticks of support and lift kept per pattern
DEFAULT_EVENTS = 50  # latest events kept
DEFAULT_SHOWN = 30  # patterns served, strongest first


@dataclass(frozen=True)
class _Point:
    tick: int
    support: float
    lift: float


@dataclass(frozen=True)
class _Window:
    tick: int
    size: int
    consumed: int
    start_time: float | None
    end_time: float | None
    tick_seconds: float
    ended_at: float  # wall clock


class StatusBoard:
    """A tick listener; :meth:`patterns_route` and :meth:`events_route` are HTTP routes."""

    def __init__(
        self, history: int = DEFAULT_HISTORY, keep_events: int = DEFAULT_EVENTS, shown: int = DEFAULT_SHOWN
    ) -> None:
        for name, value in (("history", history), ("keep_events", keep_events), ("shown", shown)):
            if value < 1:
                raise ValueError(f"{name} must be at least 1, got {value}")
        self.history = history
        self.shown = shown
        self._lock = threading.Lock()
        self._windows: deque[_Window] = deque(maxlen=history)
        self._series: dict[Names, deque[_Point]] = {}
        self._current: tuple[PatternStatus, ...] = ()
        self._events: deque[dict] = deque(maxlen=keep_events)
        self._totals = {"emerged": 0, "faded": 0}

    def on_tick(self, report: TickReport) -> None:
        """Note one tick (on the run loop's thread). O(tracked patterns)."""
        tick = report.tick.number
        window = _Window(
            tick,
            report.tick.result.n_baskets,
            report.consumed,
            report.window_start,
            report.window_end,
            report.window_update_seconds + report.refresh_seconds,
            time.time(),
        )
        with self._lock:
            self._windows.append(window)
            self._track(tick, report.patterns)
            for event in report.events:
                self._events.append(_public(event, window.ended_at))
                self._totals[event.kind] = self._totals.get(event.kind, 0) + 1

    def _track(self, tick: int, patterns: Iterable[PatternStatus]) -> None:
        current = tuple(patterns)
        series = {}
        for pattern in current:
            points = self._series.get(pattern.items) or deque(maxlen=self.history)
            points.append(_Point(tick, pattern.support, pattern.lift))
            series[pattern.items] = points
        self._series, self._current = series, current

    def patterns(self) -> dict:
        """The window and the strongest tracked patterns with their recent history."""
        with self._lock:
            windows = list(self._windows)
            shown = [(p, list(self._series[p.items])) for p in self._current[: self.shown]]
            tracked = len(self._current)
        return {
            "tick": windows[-1].tick if windows else None,
            "window": _window(windows),
            "tracked": tracked,
            "patterns": [
                {
                    "items": list(p.items),
                    "state": p.state,
                    "support": p.support,
                    "count": p.count,
                    "confidence": p.confidence,
                    "lift": p.lift,
                    "history": {
                        "ticks": [point.tick for point in points],
                        "support": [point.support for point in points],
                        "lift": [point.lift for point in points],
                    },
                }
                for p, points in shown
            ],
        }

    def events(self) -> dict:
        """The latest events, newest first, and how many of each kind this process saw."""
        with self._lock:
            return {"totals": dict(self._totals), "events": list(reversed(self._events))}

    def patterns_route(self) -> tuple[int, str, bytes]:
        return 200, JSON, _encode(self.patterns())

    def events_route(self) -> tuple[int, str, bytes]:
        return 200, JSON, _encode(self.events())


def _window(windows: list[_Window]) -> dict | None:
    """The last tick's window, with the rate baskets were taken at over the ticks kept."""
    if not windows:
        return None
    first, last = windows[0], windows[-1]
    elapsed = last.ended_at - first.ended_at
    rate = (last.consumed - first.consumed) / elapsed if elapsed > 0 else None
    return {
        "size": last.size,
        "consumed": last.consumed,
        "start_time": last.start_time,
        "end_time": last.end_time,
        "baskets_per_second": rate,
        "tick_seconds": last.tick_seconds,
        "updated_at": last.ended_at,
    }


def _public(event: DriftEvent, seen_at: float) -> dict:
    """An event as served: its JSON form without basket ids, with the wall-clock time it was seen."""
    shown = event.as_json()
    shown["window"] = {"size": event.window.size, "end_time": event.window.end_time}
    shown["seen_at"] = seen_at
    return shown


def _encode(data: dict) -> bytes:
    return json.dumps(data, ensure_ascii=False, allow_nan=False).encode()
