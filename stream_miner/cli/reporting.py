"""What the commands do with each tick: print the result, a line for a person, a snapshot
file, tick timings."""

from __future__ import annotations

import json
import statistics
import time
from collections import Counter
from pathlib import Path
from typing import Any, TextIO

from stream_miner.cli.output import json_lines, write_table
from stream_miner.runtime.atomic_file import write_text_atomically
from stream_miner.runtime.health import plural
from stream_miner.runtime.protocols import TickReport


class ResultPrinter:
    """``mine``: the full result of every tick on stdout, as JSON Lines or a table."""

    def __init__(self, out: TextIO, *, as_json: bool, show_rules: bool, numbered: bool) -> None:
        self.out = out
        self.as_json = as_json
        self.show_rules = show_rules
        self.numbered = numbered  # False: a single result, printed without a tick number

    def on_tick(self, report: TickReport) -> None:
        tick = report.tick.number if self.numbered else None
        if self.as_json:
            lines = json_lines(report.tick.result, tick)
            if lines:
                self.out.write("\n".join(lines) + "\n")
        else:
            write_table(report.tick.result, self.out, show_rules=self.show_rules, tick=tick)
        self.out.flush()


class TickLine:
    """``run``: one readable line per tick on stderr."""

    def __init__(self, out: TextIO) -> None:
        self.out = out

    def on_tick(self, report: TickReport) -> None:
        print(f"stream-miner: {describe_tick(report)}", file=self.out, flush=True)


def describe_tick(report: TickReport) -> str:
    """``tick 12: window 5,000 baskets [...]; 231 itemsets (+3 -1, 40 changed); ...``."""
    tick, result, delta = report.tick.number, report.tick.result, report.tick.delta
    window = f"window {plural(result.n_baskets, 'basket')}"
    if report.window_start is not None and report.window_end is not None:
        window += f" [{_utc(report.window_start)} to {_utc(report.window_end)} UTC]"
    itemsets = (
        f"{plural(len(result.itemsets), 'itemset')} "
        f"(+{len(delta.added)} -{len(delta.removed)}, {len(delta.changed)} changed)"
    )
    parts = [f"tick {tick}: {window}", itemsets]
    if result.rules or delta.rules_removed:
        parts.append(
            f"{plural(len(result.rules), 'rule')} (+{len(delta.rules_added)} -{len(delta.rules_removed)})"
        )
    if report.events:
        kinds = Counter(event.kind for event in report.events)
        parts.append(", ".join(f"{n} {kind}" for kind, n in sorted(kinds.items())))
    parts.append(f"{report.window_update_seconds + report.refresh_seconds:.3f} s")
    return "; ".join(parts)


def _utc(seconds: float) -> str:
    return time.strftime("%Y-%m-%d %H:%M:%S", time.gmtime(seconds))


class SnapshotWriter:
    """``run --snapshot-out``: the latest window's result, rewritten atomically every tick.

    Line 1 is a header: ``{"type": "window", "size", "consumed", "last_id", "tick"}`` plus
    ``start_time`` and ``end_time`` (event time, epoch seconds) for a time window; then the
    itemsets and rules as ``mine --json`` prints them.
    """

    def __init__(self, path: Path) -> None:
        self.path = path

    def on_tick(self, report: TickReport) -> None:
        result = report.tick.result
        header: dict[str, Any] = {
            "type": "window",
            "size": result.n_baskets,
            "consumed": report.consumed,
            "last_id": report.last_id,
            "tick": report.tick.number,
        }
        if report.window_start is not None:
            header |= {"start_time": report.window_start, "end_time": report.window_end}
        lines = [json.dumps(header), *json_lines(result)]
        write_text_atomically(self.path, "\n".join(lines) + "\n")


class TickTimings:
    """``mine --tick-timings``: seconds spent per tick applying the buffered baskets to the
    window (the same work in both modes) and refreshing the result."""

    def __init__(self) -> None:
        self.window: list[float] = []
        self.refresh: list[float] = []

    def on_tick(self, report: TickReport) -> None:
        self.window.append(report.window_update_seconds)
        self.refresh.append(report.refresh_seconds)

    def summary(self, mode: str) -> dict[str, Any]:
        """Tick count and median, mean and 90th percentile in milliseconds; the first tick
        (which may start the tracking) is left out of the refresh figures and shown apart."""
        steady = self.refresh[1:] or self.refresh
        return {
            "mode": mode,
            "ticks": len(self.refresh),
            "first_refresh_ms": round(1e3 * self.refresh[0], 3) if self.refresh else None,
            "refresh_ms": _spread(steady),
            "window_update_ms": _spread(self.window),
        }


def _spread(seconds: list[float]) -> dict[str, float] | None:
    if not seconds:
        return None
    ordered = sorted(seconds)
    return {
        "median": round(1e3 * statistics.median(ordered), 3),
        "mean": round(1e3 * statistics.fmean(ordered), 3),
        "p90": round(1e3 * ordered[int(0.9 * (len(ordered) - 1))], 3),
    }
