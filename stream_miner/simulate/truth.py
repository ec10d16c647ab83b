"""Ground truth of a generated scenario: where each planted change crosses the thresholds.

The planted itemset's exact figures are computed from the generated baskets at every tick
of the scenario's settings (a count window of ``window_size`` baskets, a tick every
``tick_every`` baskets and at the end, as ``stream-miner run`` ticks), with the detector's
own definition of a pattern (:func:`stream_miner.drift.patterns.figures`). From the first
full window on, an oracle follows the thresholds with the same hysteresis as the detector but
no confirmation and no test: a pattern not active that passes the enter thresholds has
*emerged* there; an active one that fails the exit thresholds has *faded*. Each such crossing
is a change a detector should report, after the crossing. A crossing is **required** (counted
for recall) when it clears the thresholds by ``MARGIN``: within one window after an emergence
the support reaches ``MARGIN`` x the support threshold; within one window after a fade it
drops to the exit support bar / ``MARGIN``. A spike (one item) never crosses: any report of it
is a false alarm.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from itertools import combinations

import numpy as np

from stream_miner.drift.events import EMERGED, FADED
from stream_miner.drift.patterns import Thresholds, figures
from stream_miner.engine.params import MiningParams
from stream_miner.simulate.scenarios import Generated, Settings

MARGIN = 1.5


@dataclass(frozen=True)
class Point:
    """A planted itemset at one tick: ``baskets`` taken so far (the window's end), the
    newest basket's event time, and its figures (lift and confidence None for one item);
    whether it passes the enter and the exit thresholds."""

    tick: int
    baskets: int
    time: float
    support: float
    confidence: float | None
    lift: float | None
    enters: bool
    stays: bool


@dataclass(frozen=True)
class Crossing:
    """Where a planted pattern crossed: ``emerged`` or ``faded`` at a tick."""

    kind: str
    tick: int
    baskets: int
    time: float
    support: float
    required: bool


@dataclass(frozen=True)
class Truth:
    """A planted change: its kind and items, the basket (and event time) where it begins (a
    fade: where its fall begins), the crossings a detector should report (none for a spike:
    it must not alert), and the items' figures at every tick."""

    change: str
    items: tuple[str, ...]
    start: int
    start_time: float
    crossings: tuple[Crossing, ...]
    series: tuple[Point, ...]

    @property
    def alerts(self) -> bool:
        """Whether reports of these items can be right (False: a spike, every report is wrong)."""
        return self.change != "spike"

    def as_json(self) -> dict:
        return {
            "change": self.change,
            "items": list(self.items),
            "start": self.start,
            "start_time": self.start_time,
            "crossings": [asdict(c) for c in self.crossings],
        }


def tick_ends(n: int, every: int) -> list[int]:
    """Baskets taken at each tick of a stream of ``n`` (every ``every``, and a last at the end)."""
    ends = list(range(every, n + 1, every))
    return ends + [n] if n % every else ends


def series(generated: Generated, items: tuple[str, ...], settings: Settings) -> list[Point]:
    """The figures of ``items`` (sorted) at every tick of ``settings``. Cost: one pass over
    the baskets per subset of ``items``."""
    subsets = [s for k in range(1, len(items) + 1) for s in combinations(items, k)]
    wanted = [set(s) for s in subsets]
    held = np.zeros((len(subsets), len(generated.baskets) + 1), dtype=np.int64)
    for i, basket in enumerate(generated.baskets, 1):
        present = set(basket)
        for k, subset in enumerate(wanted):
            held[k, i] = subset <= present
    running = np.cumsum(held, axis=1)
    params = MiningParams(min_support=settings.min_support)
    window, points = settings.window_size, []
    for tick, end in enumerate(tick_ends(len(generated.baskets), settings.tick_every)):
        begin = max(0, end - window)
        counts = dict(zip(subsets, (running[:, end] - running[:, begin]).tolist(), strict=True))
        n = end - begin
        enter = Thresholds(params.threshold(n), settings.min_confidence, settings.min_lift)
        support = counts[items] / n
        if len(items) == 1:
            points.append(Point(tick, end, generated.times[end - 1], support, None, None, False, False))
            continue
        fig = figures(items, n, counts.__getitem__, settings.min_confidence)
        leave = enter.lowered(settings.exit_fraction)
        time = generated.times[end - 1]
        conf, lift = float(fig.confidence), float(fig.lift)
        points.append(Point(tick, end, time, support, conf, lift, fig.passes(enter), fig.passes(leave)))
    return points


def ground_truth(generated: Generated, settings: Settings | None = None) -> list[Truth]:
    """One :class:`Truth` per planted change, in the scenario's order, at ``settings`` (the
    scenario's own by default)."""
    settings = settings or generated.scenario.settings
    truths = []
    for change, plant in zip(generated.scenario.changes, generated.plants, strict=True):
        points = series(generated, change.items, settings)
        crossings = () if change.kind == "spike" else tuple(_crossings(points, settings))
        begin = max(0, (plant.end or 0) - plant.ramp) if change.kind == "fade" else plant.start
        at = generated.times[min(begin, len(generated.times) - 1)]
        truths.append(Truth(change.kind, change.items, begin, at, crossings, tuple(points)))
    return truths


def _crossings(points: list[Point], settings: Settings) -> list[Crossing]:
    """The oracle's crossings from the first full window on (see the module docstring)."""
    full = [k for k, p in enumerate(points) if p.baskets >= settings.window_size]
    if not full:
        return []
    first = full[0]
    active = points[first].enters
    ticks_a_window = -(-settings.window_size // settings.tick_every)
    high = float(settings.min_support) * MARGIN
    low = float(settings.min_support * settings.exit_fraction) / MARGIN
    found = []
    for k in range(first + 1, len(points)):
        p = points[k]
        crossed = not p.stays if active else p.enters
        if not crossed:
            continue
        active = not active
        ahead = [q.support for q in points[k : k + ticks_a_window + 1]]
        required = max(ahead) >= high if active else min(ahead) <= low
        found.append(Crossing(EMERGED if active else FADED, p.tick, p.baskets, p.time, p.support, required))
    return found
