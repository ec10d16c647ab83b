"""Scoring drift alarms against a scenario's ground truth, and the naive detector compared.

An alarm is about a planted change when its items are the change's items, hold them, or are
two or more of them. Each alarm is then, in this order:

- a **false alarm**: about no planted change, about a spike's item (a spike must not alert),
  or outside the span of every crossing of its kind (a crossing's span runs from the
  crossing before it, or from the change's start, but from at most half a window before
  the crossing, to the crossing after it: a fade reported while the pattern emerges is
  false);
- a **hit**: the change's own items, the first alarm in a crossing's span; its delay is the
  baskets (and event time) from the crossing's tick to the alarm's window end (negative
  for an alarm before the crossing, as a detector without the exit band may raise);
- **redundant**: any other alarm about the change (a superset or part of it, or a repeat).

Recall counts hits on required crossings (see :mod:`stream_miner.simulate.truth`); precision
is the share of alarms about a planted change in the right direction (hits and redundant
ones); false alarms are also given per simulated day from the first full window on.
"""

from __future__ import annotations

import math
import statistics
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field

from stream_miner.drift.events import EMERGED, FADED
from stream_miner.engine.miner import Tick
from stream_miner.engine.rules import RuleFilter, generate_rules
from stream_miner.simulate.scenarios import Generated
from stream_miner.simulate.truth import Truth

HIT, REDUNDANT, FALSE_ALARM = "hit", "redundant", "false alarm"
LISTED_FALSE_ALARMS = 50  # per scenario in the results file (a naive detector raises thousands)


@dataclass(frozen=True)
class Alarm:
    """A reported change: its kind, items (sorted), and the baskets taken at its tick."""

    kind: str
    items: tuple[str, ...]
    baskets: int


@dataclass
class Score:
    """How a detector's alarms compare with the ground truth of one scenario."""

    alarms: int = 0
    hits: int = 0
    redundant: int = 0
    false_alarms: int = 0
    required: int = 0
    required_hits: int = 0
    crossings: int = 0
    days: float = 0.0
    delays: list[int] = field(default_factory=list)  # baskets, hits on required crossings
    delay_seconds: list[float] = field(default_factory=list)
    verdicts: list[tuple[Alarm, str]] = field(default_factory=list)

    def add(self, other: Score) -> None:
        """Pool ``other`` into this score (for totals over scenarios)."""
        for name in ("alarms", "hits", "redundant", "false_alarms", "required", "required_hits", "crossings"):
            setattr(self, name, getattr(self, name) + getattr(other, name))
        self.days += other.days
        self.delays += other.delays
        self.delay_seconds += other.delay_seconds

    @property
    def recall(self) -> float | None:
        return self.required_hits / self.required if self.required else None

    @property
    def precision(self) -> float | None:
        return (self.hits + self.redundant) / self.alarms if self.alarms else None

    @property
    def false_per_day(self) -> float | None:
        return self.false_alarms / self.days if self.days else None

    @property
    def redundant_per_change(self) -> float | None:
        return self.redundant / self.crossings if self.crossings else None

    @property
    def median_delay(self) -> float | None:
        return statistics.median(self.delays) if self.delays else None

    @property
    def median_delay_seconds(self) -> float | None:
        return statistics.median(self.delay_seconds) if self.delay_seconds else None

    def as_json(self) -> dict:
        figures = {
            name: getattr(self, name)
            for name in ("alarms", "hits", "redundant", "false_alarms", "required", "required_hits")
        }
        figures |= {
            name: None if getattr(self, name) is None else round(getattr(self, name), 4)
            for name in (
                "recall",
                "precision",
                "false_per_day",
                "redundant_per_change",
                "median_delay",
                "median_delay_seconds",
            )
        }
        figures["days"] = round(self.days, 3)
        figures["delays"] = self.delays
        listed = [(a, v) for a, v in self.verdicts if v != FALSE_ALARM]
        listed += [(a, v) for a, v in self.verdicts if v == FALSE_ALARM][:LISTED_FALSE_ALARMS]
        figures["alarm_list"] = [
            {"kind": a.kind, "items": list(a.items), "baskets": a.baskets, "verdict": v}
            for a, v in sorted(listed, key=lambda entry: entry[0].baskets)
        ]
        figures["false_alarms_not_listed"] = max(0, self.false_alarms - LISTED_FALSE_ALARMS)
        return figures


def score(alarms: Iterable[Alarm], truths: Sequence[Truth], generated: Generated, window_size: int) -> Score:
    """Classify every alarm (see the module docstring) and total the figures."""
    times = generated.times
    result = Score()
    full = min(window_size, len(times))
    result.days = (times[-1] - times[full - 1]) / 86400
    result.crossings = sum(len(t.crossings) for t in truths)
    result.required = sum(c.required for t in truths for c in t.crossings)
    hit: set[tuple[int, int]] = set()  # (truth, crossing) already reported
    for alarm in sorted(alarms, key=lambda a: (a.baskets, len(a.items), a.items)):
        verdict = _verdict(alarm, truths, hit, window_size)
        if isinstance(verdict, tuple):
            t, c = verdict
            hit.add(verdict)
            crossing = truths[t].crossings[c]
            result.hits += 1
            if crossing.required:
                result.required_hits += 1
                result.delays.append(alarm.baskets - crossing.baskets)
                result.delay_seconds.append(times[alarm.baskets - 1] - crossing.time)
            verdict = HIT
        elif verdict == REDUNDANT:
            result.redundant += 1
        else:
            result.false_alarms += 1
        result.alarms += 1
        result.verdicts.append((alarm, verdict))
    return result


def _verdict(
    alarm: Alarm, truths: Sequence[Truth], hit: set[tuple[int, int]], window_size: int
) -> str | tuple[int, int]:
    mine = set(alarm.items)
    for t, truth in enumerate(truths):
        planted = set(truth.items)
        if not truth.alerts:
            if mine & planted:
                return FALSE_ALARM
            continue
        if not (mine >= planted or (mine < planted and len(mine) >= 2)):
            continue
        c = _crossing_of(alarm, truth, window_size)
        if c is None:
            return FALSE_ALARM
        if mine == planted and (t, c) not in hit:
            return t, c
        return REDUNDANT
    return FALSE_ALARM


def _crossing_of(alarm: Alarm, truth: Truth, window_size: int) -> int | None:
    """The crossing of ``alarm``'s kind whose span holds it: after the crossing before it (the
    first: after the change began), at most half a window before it, and before the crossing
    after it."""
    crossings = truth.crossings
    for c, crossing in enumerate(crossings):
        after = max(crossings[c - 1].baskets if c else truth.start, crossing.baskets - window_size // 2 - 1)
        before = crossings[c + 1].baskets if c + 1 < len(crossings) else math.inf
        if crossing.kind == alarm.kind and after < alarm.baskets < before:
            return c
    return None


def event_alarm(event: dict, positions: dict[str, int]) -> Alarm:
    """The alarm of a drift event (JSON as ``--events-out`` writes it); ``positions`` maps a
    basket id to the baskets taken when it entered."""
    return Alarm(event["event"], tuple(event["items"]), positions[event["window"]["last_id"]])


@dataclass
class NaiveDetector:
    """Rule-set difference between consecutive ticks from the first full window on: every
    rule (passing the confidence and lift thresholds) that appears is an ``emerged`` alarm
    about its items, every one that disappears a ``faded`` alarm."""

    rules: RuleFilter
    window_size: int
    alarms: list[Alarm] = field(default_factory=list)
    _previous: set[tuple[tuple[str, ...], tuple[str, ...]]] | None = None

    def on_tick(self, tick: Tick, consumed: int) -> None:
        result = tick.result
        now = {
            (r.antecedent, r.consequent)
            for r in generate_rules(result.itemsets, result.n_baskets, self.rules)
        }
        if self._previous is not None:
            for kind, changed in ((EMERGED, now - self._previous), (FADED, self._previous - now)):
                self.alarms += [Alarm(kind, tuple(sorted(a + c)), consumed) for a, c in sorted(changed)]
        if self._previous is not None or result.n_baskets >= self.window_size:
            self._previous = now
