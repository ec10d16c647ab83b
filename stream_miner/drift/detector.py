"""The drift detector: fed every tick, it reports the co-purchase patterns that emerged or
faded, each once, and only when the change is statistically real.

Per pattern (see :mod:`stream_miner.drift.patterns`) a lifecycle runs: not tracked -> rising
-> active -> falling -> gone. A pattern starts rising when it passes the enter thresholds,
and becomes active after ``confirm_ticks`` consecutive ticks above them *and* a significant
rise against the baseline (:mod:`stream_miner.drift.baseline`): an ``emerged`` event. An
active pattern starts falling when it drops below the exit thresholds (a lower band,
``exit_fraction`` of the enter ones), and is gone after ``confirm_ticks`` ticks below them
*and* a significant fall: a ``faded`` event. A pattern that drops back before its
confirmation changes nothing, so one hovering at a threshold never flaps. A move that stays
insignificant for a whole window completes silently (no event): the pattern came or went too
gradually to call.

A move runs from one side of the band to the other: an emergence needs the pattern's support
in the baseline below the exit bar, a fade needs it at or above the enter bar there, so
noise around one threshold is no move. Significance at a tick: a rise needs both the support
(two-proportion z-test) and the association of the pattern's weakest split (log odds ratio
test) to grow, so a single item that gets popular raises nothing; a fall needs the support
to drop (a stock-out that breaks a pairing counts), or, for a pattern still bought as often
that left the band by confidence or lift, the association to drop. The p-values of every move tested at the
tick are adjusted together (Benjamini-Hochberg) and compared with ``false_discovery_rate``.
Successive ticks share most of their baskets, so their tests are not independent: the
confirmation ticks, the one event per move and the silent completion after a window bound
how often a move is looked at. Patterns one inside the other making the same move are one
change, told once (see :meth:`DriftDetector._report`).

Warm-up: until the window is full for the first time nothing is reported; the patterns
present then are the baseline (active, no event).
"""

from __future__ import annotations

import hashlib
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from fractions import Fraction
from itertools import combinations

from stream_miner.drift.baseline import Decayed, Recorded
from stream_miner.drift.events import (
    ACTIVE,
    EMERGED,
    FADED,
    FALLING,
    RISING,
    Baseline,
    DriftEvent,
    PatternStatus,
    WindowInfo,
)
from stream_miner.drift.patterns import CountOf, Figures, Names, Thresholds, figures, lift_without, splits
from stream_miner.drift.settings import DriftSettings
from stream_miner.drift.significance import DOWN, UP, benjamini_hochberg, odds_ratio_p, proportion_p
from stream_miner.engine.miner import Tick, WindowMiner
from stream_miner.engine.rules import Rule
from stream_miner.engine.window import CountWindow, TimeWindow

STATE_VERSION = 1


@dataclass(frozen=True)
class WindowView:
    """Where the window of a tick lies: ``start`` and ``end`` in basket numbers (a count
    window: the baskets taken so far minus the window size, and that count) or in event time;
    ``full`` once it has held a whole window length; ``info`` for the events."""

    start: float
    end: float
    full: bool
    info: WindowInfo


@dataclass
class _Tracked:
    """One pattern's place in its lifecycle: the state, how many ticks in a row the pending
    move held, where the window ended when the move began, and its latest figures (for a
    falling pattern, the rules it had when last active)."""

    state: str
    streak: int
    since: float
    count: int
    n_baskets: int
    confidence: float
    lift: float
    rules: tuple[Rule, ...] = ()


_IDLE = _Tracked("", 0, 0.0, 0, 0, 0.0, 0.0)  # stands in for a pattern not tracked


@dataclass(frozen=True)
class _Move:
    items: Names
    kind: str
    figures: Figures
    p_value: float
    baseline: Baseline


@dataclass
class DriftDetector:
    """Feed :meth:`update` every tick; it returns the tick's events. :meth:`state` and
    :meth:`restored` carry the whole detector across restarts (checkpoints)."""

    settings: DriftSettings = field(default_factory=DriftSettings)
    emerged_total: int = 0
    faded_total: int = 0
    baseline_tick: int | None = None  # the tick whose window was the first full one
    _tracked: dict[Names, _Tracked] = field(default_factory=dict)
    _history: list[Recorded] = field(default_factory=list)
    _reference: Recorded | None = None
    _decayed: Decayed | None = None
    _recent: dict[tuple[Names, str], float] = field(default_factory=dict)  # (items, kind) -> window end
    _count_past: Callable[[Sequence[Names], float, float], list[int]] | None = None
    _span: tuple[float, float] | None = None  # where the last tick's window lay
    _support_bar = 1.0  # the enter support threshold at the current tick, as a share
    _leave_count = 1  # the exit support threshold at the current tick, as a count
    _candidates = 0  # itemsets that could be patterns at the current tick

    # ------------------------------------------------------------------ ticks
    def update(
        self,
        tick: Tick,
        window: WindowView,
        count: Callable[[Sequence[Names]], list[int]] | None = None,
        count_past: Callable[[Sequence[Names], float, float], list[int]] | None = None,
    ) -> list[DriftEvent]:
        """The events of ``tick`` (whose window lies at ``window``). ``count`` gives exact
        window counts of itemsets below the support threshold (patterns being watched that
        left the result); ``count_past`` exact counts over a past window, given as a span of
        positions like ``window``'s (the baskets :meth:`past_needed` asks to keep). Without
        them an itemset below a threshold counts as just below it."""
        if (window.start, window.end) == self._span:
            return []  # the window has not moved since the last tick: nothing to learn, no step
        self._span = (window.start, window.end)
        self._count_past = count_past
        self._support_bar = tick.result.min_count / tick.result.n_baskets if tick.result.n_baskets else 1.0
        result = tick.result
        n = result.n_baskets
        counts = self._counts_of(result.itemsets, result.min_count, count)
        enter = Thresholds(result.min_count, self.settings.min_confidence, self.settings.min_lift)
        leave = enter.lowered(self.settings.exit_fraction)
        found = self._figures(result.itemsets, counts, n, leave)
        recorded = Recorded(
            tick.number, window.start, window.end, n, result.min_count, self._sized(result.itemsets)
        )
        if self.baseline_tick is None:
            self._warm_up(found, enter, window, recorded, tick.number)
            return []
        self._prune(window)
        self._leave_count = leave.min_count
        self._candidates = len(found)
        moves = self._step(found, enter, leave, window)
        events = self._report(moves, tick.number, window, counts, leave)
        self._remember(recorded, window)
        return events

    def follow(
        self,
        miner: WindowMiner,
        tick: Tick,
        *,
        first_id: str | None = None,
        last_id: str | None = None,
        earliest: float | None = None,
    ) -> list[DriftEvent]:
        """:meth:`update` for a tick of ``miner``: the window's place, exact counts in the
        window and in the past baskets, and which past baskets the miner keeps from now on.
        ``first_id``/``last_id`` name the window's oldest and newest basket in the events;
        ``earliest`` is the first event time seen (a time window is full once it spans a
        whole length from there). Nothing while the window is empty."""
        view = window_view(miner, tick, first_id=first_id, last_id=last_id, earliest=earliest)
        if view is None:
            return []
        events = self.update(tick, view, miner.count, miner.count_past)
        needed = self.past_needed()
        if needed is not None:
            miner.keep_past(*needed)
        elif miner.keeping_past:
            miner.stop_keeping_past()
        return events

    def _counts_of(
        self,
        itemsets: dict[Names, int],
        min_count: int,
        count: Callable[[Sequence[Names]], list[int]] | None,
    ) -> Callable[[Names], int]:
        """Exact counts: from the result, else counted in the window in one go for every
        watched pattern that left it (and its parts), else the bound below the threshold."""
        wanted = {
            part
            for items in self._tracked
            if items not in itemsets
            for size in range(1, len(items) + 1)
            for part in _subsets(items, size)
            if part not in itemsets
        }
        extra: dict[Names, int] = {}
        if wanted and count is not None:
            ordered = sorted(wanted)
            extra = dict(zip(ordered, count(ordered), strict=True))
        fallback = max(0, min_count - 1)
        return lambda items: itemsets.get(items, extra.get(items, fallback))

    def _figures(
        self, itemsets: dict[Names, int], count_of: Callable[[Names], int], n: int, leave: Thresholds
    ) -> dict[Names, Figures]:
        """Figures of every itemset that could be a pattern at the exit bar: the result's
        itemsets of pattern size, and every watched pattern."""
        found: dict[Names, Figures] = {}
        floor = max(leave.min_lift, Fraction(1))
        for items in [*itemsets, *self._tracked]:
            if not 2 <= len(items) <= self.settings.max_size or items in found:
                continue
            tracked = items in self._tracked  # its exact figures are wanted, pattern or not
            fig = figures(items, n, count_of, self.settings.min_confidence, None if tracked else floor)
            if fig.improves or tracked:
                found[items] = fig
        return found

    def _sized(self, itemsets: dict[Names, int]) -> dict[Names, int]:
        limit = self.settings.max_size
        return {items: c for items, c in itemsets.items() if len(items) <= limit}

    def _warm_up(
        self,
        found: dict[Names, Figures],
        enter: Thresholds,
        window: WindowView,
        recorded: Recorded,
        tick: int,
    ) -> None:
        """Before the first full window: the patterns present become the baseline, silently."""
        self._tracked = {
            items: _tracked(ACTIVE, 0, window.end, fig) for items, fig in found.items() if fig.passes(enter)
        }
        if window.full:
            self.baseline_tick = tick
            self._reference = recorded
            self._history = [recorded]
            if self.settings.baseline == "decayed":
                self._decayed = Decayed(0.5 ** (1.0 / self.settings.half_life))
                self._decayed.fold(recorded)

    def _step(
        self, found: dict[Names, Figures], enter: Thresholds, leave: Thresholds, window: WindowView
    ) -> list[_Move]:
        """Advance every lifecycle by this tick's figures; return the moves due for a test."""
        due: list[tuple[Names, str, Figures]] = []
        for items, fig in found.items():
            if items not in self._tracked and fig.passes(enter):
                self._tracked[items] = _tracked(RISING, 0, window.end, fig)
        for items, pattern in list(self._tracked.items()):
            fig = found[items]  # every watched pattern has figures (see _figures)
            if pattern.state == RISING:
                if not fig.passes(enter):
                    del self._tracked[items]
                    continue
                pattern.streak += 1
                _refresh(pattern, fig, keep_rules=False)
                if pattern.streak >= self.settings.confirm_ticks:
                    due.append((items, EMERGED, fig))
            elif pattern.state == ACTIVE:
                if fig.passes(leave):
                    _refresh(pattern, fig, keep_rules=False)
                else:
                    pattern.state, pattern.streak, pattern.since = FALLING, 0, window.end
            if pattern.state == FALLING:
                if fig.passes(leave):
                    pattern.state, pattern.streak = ACTIVE, 0
                    _refresh(pattern, fig, keep_rules=False)
                    continue
                pattern.streak += 1
                _refresh(pattern, fig, keep_rules=True)
                if pattern.streak >= self.settings.confirm_ticks:
                    due.append((items, FADED, fig))
        return self._tested(due, window)

    def _tested(self, due: list[tuple[Names, str, Figures]], window: WindowView) -> list[_Move]:
        """The due moves that are significant at the false discovery rate. Benjamini-Hochberg
        counts every candidate pattern of the tick as a test (the moves due are picked from
        them by their current counts, so the others count as tested and not significant). A
        due move that stayed insignificant for a whole window completes silently."""
        tests = [(items, kind, fig, *self._evidence(items, kind, fig)) for items, kind, fig in due]
        adjusted = benjamini_hochberg([p for *_, p, _ in tests], self._candidates)
        moves = []
        for (items, kind, fig, _, baseline), p in zip(tests, adjusted, strict=True):
            if p <= self.settings.false_discovery_rate:
                moves.append(_Move(items, kind, fig, p, baseline))
            elif window.start >= self._tracked[items].since:  # a whole window went by
                self._complete(items, kind)
        return moves

    def _evidence(self, items: Names, kind: str, fig: Figures) -> tuple[float, Baseline]:
        """The p-value of ``kind`` for ``items`` against the baseline, and the baseline's figures."""
        look = self._baseline_count(items)
        n0 = self._baseline_size()
        c0, exact = look(items)
        was = c0 / n0 if n0 else 0.0
        left, right, n_left, n_right = fig.weakest
        if kind == FADED:  # a fade starts above the enter bar in the baseline
            established = exact and was >= self._support_bar
            p = proportion_p(round(c0), round(n0), fig.count, fig.n_baskets, DOWN) if established else 1.0
            (l0, l_exact), (r0, r_exact) = look(left), look(right)
            if established and fig.count >= self._leave_count and l_exact and r_exact:
                # still bought as often: it is the association that weakened
                before = (round(c0), round(l0), round(r0), round(n0))
                p = odds_ratio_p(before, (fig.count, n_left, n_right, fig.n_baskets), DOWN)
        elif exact and was >= self._support_bar * self.settings.exit_fraction:  # it was there already
            p = 1.0
        else:  # an emergence starts below the exit bar in the baseline
            p = proportion_p(round(c0), round(n0), fig.count, fig.n_baskets, UP)
            (l0, l_exact), (r0, r_exact) = look(left), look(right)
            floor = 0 if self.settings.baseline == "decayed" else self._baseline_window().min_count
            if l_exact and r_exact and min(l0, r0) >= floor:  # else a part was rare: nothing to compare
                before = (round(c0), round(l0), round(r0), round(n0))
                p = max(p, odds_ratio_p(before, (fig.count, n_left, n_right, fig.n_baskets), UP))
        return p, self._baseline_figures(items, c0, exact, n0, look)

    def _baseline_count(self, items: Names) -> Callable[[Names], tuple[float, bool]]:
        """Counts of ``items`` and its parts in the baseline: recorded, else counted exactly in
        the kept past baskets when the host counts them, else bounds."""
        if self.settings.baseline == "decayed" and self._decayed is not None:
            return self._decayed.count
        base = self._baseline_window()
        count_past = self._count_past
        if count_past is None:
            return base.count
        parts = [part for size in range(1, len(items) + 1) for part in combinations(items, size)]
        missing = [part for part in parts if part not in base.counts]
        counted = (
            dict(zip(missing, count_past(missing, base.start, base.end), strict=True)) if missing else {}
        )

        def look(part: Names) -> tuple[float, bool]:
            return (counted[part], True) if part in counted else base.count(part)

        return look

    def _baseline_size(self) -> float:
        if self.settings.baseline == "decayed" and self._decayed is not None:
            return self._decayed.n_baskets
        return self._baseline_window().n_baskets

    def _baseline_window(self) -> Recorded:
        """The recorded window the current one is compared with (see the module's policies)."""
        assert self._reference is not None
        if self.settings.baseline == "reference" or not self._history:
            return self._reference
        return self._history[0]

    def _baseline_figures(
        self, items: Names, c0: float, exact: bool, n0: float, look: Callable[[Names], tuple[float, bool]]
    ) -> Baseline:
        """The baseline's count, and its confidence and lift where every count is exact."""
        if not exact or not n0:
            return Baseline(round(c0), round(n0), None, None, exact)
        confidence, lift = 0.0, None
        for left, right in splits(items):
            (cl, el), (cr, er) = look(left), look(right)
            if not (el and er) or not cl or not cr:
                return Baseline(round(c0), round(n0), None, None, exact)
            confidence = max(confidence, c0 / cl, c0 / cr)
            split_lift = c0 * n0 / (cl * cr)
            lift = split_lift if lift is None else min(lift, split_lift)
        return Baseline(round(c0), round(n0), confidence, lift, exact)

    def _report(
        self, moves: list[_Move], tick: int, window: WindowView, count_of: CountOf, leave: Thresholds
    ) -> list[DriftEvent]:
        """Events for the significant moves: one per real change. Two patterns, one inside the
        other, making the same move are one change. The smaller is only a part of the larger
        when it is not productive in the baskets that lack the larger's other items (Webb's
        independent productivity, "Self-sufficient itemsets", ACM TKDD 2010): then the larger
        pattern's event tells it (the smaller waits while the larger still rises or falls).
        Otherwise the smaller pattern is the change and the larger one's move is folded
        into it."""
        floor = max(leave.min_lift, Fraction(1))
        n = window.info.size

        def explains(whole: Names, part: Names) -> bool:
            return not lift_without(part, whole, n, count_of) > floor

        events = []
        for move in sorted(moves, key=lambda m: (-len(m.items), m.items)):
            kind, items = move.kind, move.items
            pending = RISING if kind == EMERGED else FALLING
            candidates = [
                (whole, self._moved(whole, kind, moves, window))
                for whole in self._neighbours(items, kind, moves, bigger=True)
            ]
            larger = [
                (whole, moved)
                for whole, moved in candidates
                if (moved or self._tracked.get(whole, _IDLE).state == pending) and explains(whole, items)
            ]
            if larger and not any(moved for _, moved in larger):
                continue  # a larger pattern is still on its way: this one waits for it
            folded = bool(larger) or any(
                self._moved(part, kind, moves, window)
                and not explains(items, part)
                and self._linked(items, part)
                for part in self._neighbours(items, kind, moves, bigger=False)
            )
            pattern = self._tracked[items]
            rules = move.figures.rules if kind == EMERGED else pattern.rules
            self._complete(items, kind)
            if folded:
                continue
            self._recent[(items, kind)] = window.end
            if kind == EMERGED:
                self.emerged_total += 1
            else:
                self.faded_total += 1
            events.append(
                DriftEvent(
                    kind=kind,
                    id=event_id(kind, tick, items),
                    tick=tick,
                    items=items,
                    rules=tuple(sorted(rules, key=lambda r: (-r.confidence, r.antecedent))),
                    count=move.figures.count,
                    n_baskets=move.figures.n_baskets,
                    baseline=move.baseline,
                    p_value=move.p_value,
                    window=window.info,
                )
            )
        return sorted(events, key=lambda e: (len(e.items), e.items))

    def _neighbours(self, items: Names, kind: str, moves: list[_Move], *, bigger: bool) -> set[Names]:
        """Patterns (two or more items) strictly containing ``items`` (``bigger``) or strictly
        inside it, among those tracked, moving now or recently moved the same way."""
        known = {*self._tracked, *(m.items for m in moves), *(i for i, k in self._recent if k == kind)}
        mine = set(items)
        if bigger:
            return {other for other in known if len(other) > len(items) and mine < set(other)}
        return {other for other in known if 2 <= len(other) < len(items) and set(other) < mine}

    def _linked(self, items: Names, part: Names) -> bool:
        """Whether every item of ``items`` outside ``part`` already goes with ``part``: an
        active pattern inside ``items`` holds it and an item of ``part``. Then ``items``
        moving with ``part`` is ``part``'s change; otherwise an item joined (or left) the
        bundle, a change of its own."""
        inside, mine = set(part), set(items)
        settled = [set(p) for p, t in self._tracked.items() if t.state == ACTIVE and set(p) <= mine]
        return all(any(x in p and p & inside for p in settled) for x in mine - inside)

    def _moved(self, items: Names, kind: str, moves: list[_Move], window: WindowView) -> bool:
        """Whether ``items`` makes the move ``kind`` now or made it within the last window."""
        if any(m.items == items and m.kind == kind for m in moves):
            return True
        return self._recent.get((items, kind), -math.inf) > window.start

    def _complete(self, items: Names, kind: str) -> None:
        """Finish a move: a rising pattern becomes active, a falling one is gone."""
        if kind == EMERGED:
            pattern = self._tracked[items]
            pattern.state, pattern.streak = ACTIVE, 0
        else:
            del self._tracked[items]

    def _remember(self, recorded: Recorded, window: WindowView) -> None:
        """Keep the recorded windows that may still serve as a baseline: the newest one that
        ends at or before the current start, and every later one."""
        self._history.append(recorded)
        self._prune(window)

    def _prune(self, window: WindowView) -> None:
        """Fold the recorded windows now disjoint from ``window`` into the decayed history
        (each after the last folded) and drop those no baseline needs any more: keep the
        newest one that ends at or before ``window``'s start, and every later one."""
        decayed = self._decayed
        if decayed is not None:
            for old in self._history:
                if old.end <= window.start and old.start >= decayed.end:
                    decayed.fold(old)
        while len(self._history) > 1 and self._history[1].end <= window.start:
            self._history.pop(0)
        cutoff = window.start
        self._recent = {key: end for key, end in self._recent.items() if end > cutoff}

    def past_needed(self) -> tuple[float, float] | None:
        """The span of past positions a later comparison may count in (the host keeps those
        baskets after they leave the window); None when none will be."""
        if self.settings.baseline == "decayed":
            return None
        if self.settings.baseline == "reference" or not self._history:
            return None if self._reference is None else (self._reference.start, self._reference.end)
        return self._history[0].start, math.inf

    # ------------------------------------------------------------------ reads
    def patterns(self) -> list[PatternStatus]:
        """Every tracked pattern, by support (then items)."""
        statuses = [
            PatternStatus(items, p.state, p.count, p.n_baskets, p.confidence, p.lift)
            for items, p in self._tracked.items()
        ]
        return sorted(statuses, key=lambda s: (-s.support, s.items))

    @property
    def active_count(self) -> int:
        """Patterns reported (or part of the baseline) and not gone: active or falling."""
        return sum(1 for p in self._tracked.values() if p.state in (ACTIVE, FALLING))

    # ------------------------------------------------------------------ persistence
    def state(self) -> dict:
        """The detector as JSON-ready data (for a checkpoint)."""
        return {
            "version": STATE_VERSION,
            "emerged_total": self.emerged_total,
            "faded_total": self.faded_total,
            "baseline_tick": self.baseline_tick,
            "tracked": [[list(items), _tracked_state(p)] for items, p in self._tracked.items()],
            "history": [r.state() for r in self._history],
            "reference": None if self._reference is None else self._reference.state(),
            "decayed": None if self._decayed is None else self._decayed.state(),
            "recent": [[list(items), kind, end] for (items, kind), end in self._recent.items()],
            "span": None if self._span is None else list(self._span),
            "baseline": self.settings.baseline,
        }

    @classmethod
    def restored(cls, state: dict, settings: DriftSettings) -> DriftDetector:
        """A detector holding ``state`` (from :meth:`state`), deciding by ``settings``."""
        if state.get("version") != STATE_VERSION:
            raise ValueError(f"drift state version {state.get('version')!r} is not {STATE_VERSION}")
        detector = cls(settings, int(state["emerged_total"]), int(state["faded_total"]))
        detector.baseline_tick = None if state["baseline_tick"] is None else int(state["baseline_tick"])
        detector._tracked = {tuple(items): _tracked_from(entry) for items, entry in state["tracked"]}
        detector._history = [Recorded.from_state(entry) for entry in state["history"]]
        if state["reference"] is not None:
            detector._reference = Recorded.from_state(state["reference"])
        if state["decayed"] is not None:
            detector._decayed = Decayed.from_state(state["decayed"])
        detector._recent = {(tuple(items), str(kind)): float(end) for items, kind, end in state["recent"]}
        span = state.get("span")
        detector._span = None if span is None else (float(span[0]), float(span[1]))
        detector._fit_settings(state.get("baseline", settings.baseline))
        return detector

    def _fit_settings(self, baseline_before: str) -> None:
        """After a restart with other settings: forget patterns larger than the pattern size
        now allowed, and start or drop the decayed history when the baseline policy changed
        (a new decayed history starts from the first full window)."""
        limit = self.settings.max_size
        self._tracked = {items: p for items, p in self._tracked.items() if len(items) <= limit}
        self._recent = {key: end for key, end in self._recent.items() if len(key[0]) <= limit}
        if self.settings.baseline == baseline_before:
            return
        self._decayed = None
        if self.settings.baseline == "decayed" and self._reference is not None:
            self._decayed = Decayed(0.5 ** (1.0 / self.settings.half_life))
            self._decayed.fold(self._reference)


def window_view(
    miner: WindowMiner,
    tick: Tick,
    *,
    first_id: str | None = None,
    last_id: str | None = None,
    earliest: float | None = None,
) -> WindowView | None:
    """Where ``miner``'s window lies at ``tick`` (None while it is empty): basket numbers for
    a count window, event time for a time window."""
    n = tick.result.n_baskets
    if not n:
        return None
    window = miner.window
    if isinstance(window, TimeWindow):
        end = miner.newest_time
        full = earliest is not None and end - earliest >= window.seconds
        return WindowView(end - window.seconds, end, full, WindowInfo(n, first_id, last_id, end))
    full = isinstance(window, CountWindow) and n >= window.size
    start = miner.left_total
    return WindowView(start, start + n, full, WindowInfo(n, first_id, last_id, None))


def event_id(kind: str, tick: int, items: Names) -> str:
    """A deterministic event id: the kind, the tick and a digest of the items."""
    digest = hashlib.sha1("\x1f".join(items).encode()).hexdigest()[:12]
    return f"{kind}-{tick}-{digest}"


def _subsets(items: Names, size: int) -> list[Names]:
    return list(combinations(items, size))


def _tracked(state: str, streak: int, since: float, fig: Figures) -> _Tracked:
    pattern = _Tracked(state, streak, since, 0, 0, 0.0, 0.0)
    _refresh(pattern, fig, keep_rules=False)
    return pattern


def _refresh(pattern: _Tracked, fig: Figures, *, keep_rules: bool) -> None:
    """Take the pattern's figures now; its rules too unless ``keep_rules`` or none pass now
    (a faded event lists the rules it last had)."""
    pattern.count, pattern.n_baskets = fig.count, fig.n_baskets
    pattern.confidence, pattern.lift = float(fig.confidence), float(fig.lift)
    if not keep_rules and fig.rules:
        pattern.rules = fig.rules


def _tracked_state(p: _Tracked) -> list:
    rules = [[list(r.antecedent), list(r.consequent), r.count, r.antecedent_count, r.consequent_count,
              r.n_baskets] for r in p.rules]  # fmt: skip
    return [p.state, p.streak, p.since, p.count, p.n_baskets, p.confidence, p.lift, rules]


def _tracked_from(entry: list) -> _Tracked:
    state, streak, since, count, n, confidence, lift, rules = entry
    return _Tracked(
        str(state), int(streak), float(since), int(count), int(n), float(confidence), float(lift),
        tuple(Rule(tuple(a), tuple(c), int(k), int(na), int(nc), int(nn)) for a, c, k, na, nc, nn in rules),
    )  # fmt: skip
