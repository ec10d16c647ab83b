"""The backtest's findings as one JSON-ready object: what ``--json`` writes and the HTML
report embeds (and draws).

Top-level keys: ``report`` (its kind and the stream-miner version), ``input``, ``settings``
(each with the ``run`` option that sets it, in ``run_options``), ``run`` (baskets, ticks,
wall time, throughput, tick times, what was set aside), ``detector`` (events by kind,
patterns by state at the end, events per 1,000 baskets and per day of event time),
``events`` (as ``run --events-out`` writes them, plus ``baskets``: baskets read at that tick,
and ``window_start``), ``timeline`` (sampled ticks, ``TICK_COLUMNS``) and ``patterns`` (the
charted patterns' points, ``POINT_COLUMNS``). Floats are plain JSON numbers; fractions given
as options are written as floats.
"""

from __future__ import annotations

from collections import Counter
from typing import Any

from stream_miner import __version__
from stream_miner.engine.window import CountWindow, TimeWindow
from stream_miner.report.recorder import POINT_COLUMNS, TICK_COLUMNS, BacktestRecorder
from stream_miner.runtime.runner import RunFigures, RunSettings

DAY = 86400.0


def settings_of(settings: RunSettings) -> dict[str, Any]:
    """The replay's settings by ``run`` option name (without the dashes)."""
    params, drift, window = settings.params, settings.drift, settings.window
    out: dict[str, Any] = {}
    if isinstance(window, CountWindow):
        out["window-size"] = window.size
    elif isinstance(window, TimeWindow):
        out["window-time"] = window.seconds
    out["tick-every"] = settings.tick_every
    if isinstance(window, TimeWindow):
        out["allowed-lateness"] = settings.allowed_lateness
        out["late"] = "drop" if settings.drop_late else "dead-letter"
    if params.min_support is not None:
        out["min-support"] = float(params.min_support)  # normalised to a Fraction
    else:
        out["min-count"] = params.min_count
    out["max-itemsets"] = params.max_itemsets
    if params.max_size is not None:
        out["max-size"] = params.max_size
    if params.include is not None:
        out["include"] = sorted(params.include)
    if params.exclude:
        out["exclude"] = sorted(params.exclude)
    out["max-basket-items"] = settings.policy.max_items
    out["oversize"] = settings.policy.oversize.value
    if drift is not None:
        out |= {
            "min-confidence": float(drift.min_confidence),
            "min-lift": float(drift.min_lift),
            "exit-fraction": float(drift.exit_fraction),
            "confirm-ticks": drift.confirm_ticks,
            "false-discovery-rate": drift.false_discovery_rate,
            "baseline": drift.baseline,
            "pattern-size": drift.max_size,
        }
        if drift.baseline == "decayed":
            out["half-life"] = drift.half_life
    return out


def run_options(settings: dict[str, Any]) -> list[str]:
    """The ``run`` options that give the same settings (defaults included)."""
    options: list[str] = []
    for name, value in settings.items():
        for one in value if isinstance(value, list) else [value]:
            options += [f"--{name}", _text(one)]
    return options


def _text(value: object) -> str:
    """A value as an option takes it: floats short where that is exact (0.05, 3600)."""
    if isinstance(value, float):
        short = f"{value:g}"
        return short if float(short) == value else repr(value)
    return str(value)


def backtest_data(
    *,
    source: str,
    fmt: str,
    settings: RunSettings,
    recorder: BacktestRecorder,
    figures: RunFigures,
    wall_seconds: float,
    complete: bool,
    chart_patterns: int,
) -> dict[str, Any]:
    """Everything the report shows (see the module docstring)."""
    shown = settings_of(settings)
    consumed = figures.consumed
    last = recorder.last
    states = Counter(p.state for p in recorder.last_patterns)
    first_end = next((row[6] for row in recorder.ticks if row[6] is not None), None)
    last_end = None if last is None else last.window_end
    span = None if first_end is None or last_end is None else last_end - first_end
    tracked = {p.items for p in recorder.last_patterns}
    events = sum(recorder.kinds.values())
    return {
        "report": {"kind": "stream-miner backtest", "version": __version__},
        "input": {"source": source, "format": fmt},
        "settings": shown,
        "run_options": run_options(shown),
        "run": {
            "complete": complete,
            "baskets": consumed,
            "ticks": recorder.tick_count,
            "wall_seconds": wall_seconds,
            "baskets_per_second": consumed / wall_seconds if wall_seconds > 0 else None,
            "tick_seconds": recorder.tick_seconds(),
            "window_at_end": None if last is None else last.tick.result.n_baskets,
            "itemsets_at_end": None if last is None else len(last.tick.result.itemsets),
            "window_end_time": None if last is None else last.window_end,
            "duplicates_skipped": figures.duplicates,
            "dropped_late": figures.dropped_late,
            "set_aside": dict(sorted(figures.rejected.items())),
        },
        "detector": {
            "emerged": recorder.kinds["emerged"],
            "faded": recorder.kinds["faded"],
            "events_listed": len(recorder.events),
            "events_left_out": recorder.events_left_out,
            "patterns_at_end": {state: states[state] for state in ("rising", "active", "falling")},
            "events_per_1000_baskets": 1000 * events / consumed if consumed else None,
            "event_time_span_seconds": span,
            "events_per_day": events * DAY / span if span else None,
        },
        "events": recorder.events,
        "timeline": {
            "every": recorder.every,
            "columns": list(TICK_COLUMNS),
            "rows": [list(row) for row in recorder.ticks],
        },
        "patterns": [
            {
                "items": list(series.items),
                "state": series.state if series.items in tracked else "gone",
                "peak_support": series.peak,
                "events": series.events,
                "columns": list(POINT_COLUMNS),
                "points": [list(point) for point in series.points],
            }
            for series in recorder.chosen(chart_patterns)
        ],
    }
