"""The drift detector on generated streams with planted changes (engine level: WindowMiner
ticks fed to DriftDetector), and its pattern figures and window counts against brute force.

Every stream: a count window of 2,000 baskets, a tick every 200, minimum support 5%,
confidence 0.5 and lift 1.5 (the command line of the issue). Base baskets come from
:func:`stream_miner.simulate.planted.baskets` (independent items, Zipf-like popularity);
planted items are names outside the catalogue, so a pattern among them is the plant.
"""

from __future__ import annotations

import json
import re
from collections import Counter
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from fractions import Fraction
from itertools import combinations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from drift_streams import PARAMS, SETTINGS, Seen, T, W, describe, replay
from stream_miner.drift.detector import DriftDetector, DriftSettings, event_id
from stream_miner.drift.events import ACTIVE, EMERGED, FADED
from stream_miner.drift.patterns import figures, lift_without
from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.window import CountWindow
from stream_miner.simulate.planted import Plant, baskets


@dataclass(frozen=True)
class Hover:
    """A plant whose rate alternates between ``high`` and ``low`` every ``period`` baskets
    from ``start`` on (the generator asks a plant only for ``items`` and ``rate_at``)."""

    items: tuple[str, ...]
    low: float
    high: float
    period: int
    start: int = 0

    def rate_at(self, i: int) -> float:
        if i < self.start:
            return 0.0
        return self.high if (i - self.start) // self.period % 2 == 0 else self.low


def events_of(
    plants: Sequence[Plant | Hover], n: int, seed: int, **kwargs
) -> tuple[list[Seen], DriftDetector]:
    detector = DriftDetector(kwargs.pop("settings", SETTINGS))
    [seen] = replay(baskets(n, plants, seed=seed, **kwargs), [detector])  # type: ignore[arg-type]
    return seen, detector


def about(seen: list[Seen], items: Sequence[str]) -> list[Seen]:
    return [s for s in seen if s.event.items == tuple(items)]


# ------------------------------------------------------------------ planted changes
@pytest.mark.parametrize("seed", [0, 1])
def test_a_planted_pair_emerges_once_within_a_window(seed):
    seen, _ = events_of([Plant(("new-a", "new-b"), 0.1, start=6000)], 11000, seed)
    assert [(s.event.kind, s.event.items) for s in seen] == [(EMERGED, ("new-a", "new-b"))], describe(seen)
    assert 6000 < seen[0].end <= 6000 + W
    rules = {(r.antecedent, r.consequent) for r in seen[0].event.rules}
    assert rules <= {(("new-a",), ("new-b",)), (("new-b",), ("new-a",))} and rules


@pytest.mark.parametrize("seed", [0, 1])
def test_a_planted_pair_fades_once_within_a_window(seed):
    seen, detector = events_of([Plant(("old-a", "old-b"), 0.1, end=8000)], 12000, seed)
    assert [(s.event.kind, s.event.items) for s in seen] == [(FADED, ("old-a", "old-b"))], describe(seen)
    assert 8000 < seen[0].end <= 8000 + W
    assert seen[0].event.baseline.exact and seen[0].event.baseline.support > 0.08
    assert ("old-a", "old-b") not in {p.items for p in detector.patterns()}


@pytest.mark.parametrize("seed", [0, 1])
def test_a_planted_three_item_bundle_is_one_event_for_the_triple(seed):
    triple = ("t-a", "t-b", "t-c")
    seen, detector = events_of([Plant(triple, 0.1, start=6000)], 11000, seed)
    assert [(s.event.kind, s.event.items) for s in seen] == [(EMERGED, triple)], describe(seen)
    assert 6000 < seen[0].end <= 6000 + W
    # its pairs are followed (active) but never reported on their own
    tracked = {p.items: p.state for p in detector.patterns()}
    assert all(tracked.get(pair) == ACTIVE for pair in combinations(triple, 2)), tracked


@pytest.mark.parametrize("seed", [0, 1])
def test_a_bundle_beside_an_established_pair_is_reported_without_the_old_partner(seed):
    plants = [Plant(("p-a", "p-b"), 0.1, start=6000), Plant(("p-a", "assoc-c"), 0.15)]
    seen, _ = events_of(plants, 11000, seed)
    assert [(s.event.kind, s.event.items) for s in seen] == [(EMERGED, ("p-a", "p-b"))], describe(seen)
    assert 6000 < seen[0].end <= 6000 + W
    assert not any("assoc-c" in s.event.items for s in seen)
    assert all("assoc-c" not in r.antecedent + r.consequent for r in seen[0].event.rules)


@pytest.mark.parametrize(
    "spike",
    [("hot",), ("item-0002",)],  # an item new to the stream; a popular catalogue item
    ids=["new item", "catalogue item"],
)
def test_a_single_item_spike_raises_no_event(spike):
    seen, _ = events_of([Plant(spike, 0.35, start=5000)], 11000, seed=3)
    assert seen == [], describe(seen)


@pytest.mark.parametrize(
    "seed, shape",
    [(0, {}), (1, {"mean_size": 6, "catalogue": 80, "skew": 1.3})],
    ids=["sparse catalogue", "dense catalogue"],
)
def test_a_stationary_stream_raises_no_event(seed, shape):
    plants = [
        Plant(("s-a", "s-b"), 0.15),  # clearly above the thresholds
        Plant(("s-c", "s-d", "s-e"), 0.12),
        Plant(("w-a", "w-b"), 0.02),  # clearly below
        Plant(("w-c", "w-d"), 0.03),
    ]
    seen, detector = events_of(plants, 16000, seed, **shape)
    assert seen == [], describe(seen)
    tracked = {p.items for p in detector.patterns()}
    assert {("s-a", "s-b"), ("s-c", "s-d", "s-e")} <= tracked
    assert not tracked & {("w-a", "w-b"), ("w-c", "w-d")}


@pytest.mark.parametrize("seed", [3, 10])
def test_a_pattern_hovering_at_a_threshold_never_flaps(seed):
    plants = [
        Hover(("h-a", "h-b"), 0.04, 0.06, 300),  # at the enter threshold from the start
        Hover(("h-c", "h-d"), 0.04, 0.06, 300, start=6000),  # at it, new from basket 6,000
        Hover(("h-g", "h-h"), 0.045, 0.057, 250),
        Plant(("h-e", "h-f"), 0.1, end=6000),  # active, then at the exit threshold (4%)
        Hover(("h-e", "h-f"), 0.035, 0.045, 400, start=6000),
    ]
    seen, _ = events_of(plants, 24000, seed)
    per_pattern = Counter(s.event.items for s in seen)
    assert all(k == 1 for k in per_pattern.values()), describe(seen)
    assert {s.event.kind for s in about(seen, ("h-a", "h-b")) + about(seen, ("h-g", "h-h"))} <= {FADED}


@pytest.mark.parametrize("seed", [0, 1])
def test_patterns_of_the_first_full_window_are_the_baseline(seed):
    plants = [
        Plant(("w-a", "w-b"), 0.15),
        Plant(("w-c", "w-d", "w-e"), 0.1),
        Plant(("late-a", "late-b"), 0.2, start=400),  # arrives before the window is first full
    ]
    seen, detector = events_of(plants, 8000, seed)
    assert seen == [], describe(seen)
    assert detector.baseline_tick == W // T - 1  # the tick whose window first held 2,000
    states = {p.items: p.state for p in detector.patterns()}
    for items in (("w-a", "w-b"), ("w-c", "w-d", "w-e"), ("late-a", "late-b")):
        assert states.get(items) == ACTIVE, states


@pytest.mark.parametrize("policy", ["previous", "reference", "decayed"])
def test_every_baseline_policy_detects_the_planted_emerge_and_fade(policy):
    plants = [Plant(("bundle-a", "bundle-b"), 0.1, start=6000), Plant(("old-x", "old-y"), 0.1, end=8000)]
    chosen = DriftSettings(min_confidence=Fraction(1, 2), min_lift=Fraction(3, 2), baseline=policy)
    seen, _ = events_of(plants, 11000, seed=2, settings=chosen)
    found = [(s.event.kind, s.event.items) for s in seen]
    assert found == [(EMERGED, ("bundle-a", "bundle-b")), (FADED, ("old-x", "old-y"))], describe(seen)
    assert 6000 < seen[0].end <= 6000 + W
    assert 8000 < seen[1].end <= 8000 + W


# ------------------------------------------------------------------ harder changes
@pytest.mark.parametrize("seed", [0, 1, 3])
def test_a_new_pair_well_above_the_threshold_is_reported(seed):
    """7% against a 5% threshold, never bought before: the baseline counts it exactly (0)."""
    seen, detector = events_of([Plant(("new-a", "new-b"), 0.07, start=6000)], 11000, seed=seed)
    assert ("new-a", "new-b") in {p.items for p in detector.patterns()}  # it is followed, active
    assert [(s.event.kind, s.event.items) for s in seen] == [(EMERGED, ("new-a", "new-b"))], describe(seen)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_a_bundle_gaining_a_member_is_reported(seed):
    """{a, b} from basket 5,000, then c joins half of them from 6,000: c is a change of its
    own (no active pattern linked it to the bundle), so an event names it."""
    plants = [Plant(("x-a", "x-b"), 0.1, start=5000), Plant(("x-a", "x-b", "x-c"), 0.1, start=6000)]
    seen, detector = events_of(plants, 10000, seed=seed)
    assert ("x-a", "x-b", "x-c") in {p.items for p in detector.patterns()}
    got = [(s.event.kind, s.event.items) for s in seen]
    assert got == [(EMERGED, ("x-a", "x-b")), (EMERGED, ("x-a", "x-b", "x-c"))], describe(seen)


# ------------------------------------------------------------------ restarts and ids
@pytest.mark.parametrize("policy", ["previous", "decayed"])
def test_state_round_trip_at_every_tick_gives_the_same_events(policy):
    plants = [
        Plant(("bundle-a", "bundle-b"), 0.1, start=6000),
        Plant(("old-x", "old-y", "old-z"), 0.1, end=7600),
        Plant(("p-a", "assoc-c"), 0.15),
        Plant(("p-a", "p-b"), 0.1, start=4400),
        Plant(("t-a", "t-b", "t-c"), 0.1, start=5000),
        Plant(("x-a", "x-b"), 0.08, start=6000),  # with the next: a move folded into an earlier one
        Plant(("x-a", "x-b", "x-c"), 0.1, start=6000),
    ]
    chosen = DriftSettings(min_confidence=Fraction(1, 2), min_lift=Fraction(3, 2), baseline=policy)
    straight, restored = DriftDetector(chosen), DriftDetector(chosen)
    seen = replay(baskets(11000, plants, seed=5), [straight, restored], round_trip=True)
    kinds = [(s.event.kind, s.event.items) for s in seen[0]]
    assert (EMERGED, ("bundle-a", "bundle-b")) in kinds and (FADED, ("old-x", "old-y", "old-z")) in kinds
    assert (EMERGED, ("t-a", "t-b", "t-c")) in kinds and not any(
        len(items) == 2 and items[0] == "t-a" for _, items in kinds
    )
    assert [(s.end, s.event.as_json()) for s in seen[1]] == [(s.end, s.event.as_json()) for s in seen[0]]


def test_a_detector_restored_mid_rise_reports_like_one_never_stopped():
    plants = [Plant(("bundle-a", "bundle-b"), 0.1, start=6000)]
    rows = list(baskets(9000, plants, seed=1))
    [first] = replay(rows, [DriftDetector(SETTINGS)])
    [event] = first
    # replay up to the tick before the event, save, restore into a fresh process's detector
    miner, detector = WindowMiner(CountWindow(W)), DriftDetector(SETTINGS)
    later: list[Seen] = []
    for i, basket in enumerate(rows, 1):
        miner.add(basket)
        if i % T:
            continue
        tick = miner.tick(PARAMS)
        later.extend(Seen(i, e) for e in detector.follow(miner, tick))
        if i == event.end - T:
            states = {p.items: p.state for p in detector.patterns()}
            assert states.get(("bundle-a", "bundle-b")) == "rising"  # the move is pending here
            detector = DriftDetector.restored(json.loads(json.dumps(detector.state())), SETTINGS)
    assert [(s.end, s.event.as_json()) for s in later] == [(event.end, event.event.as_json())]


def test_event_ids_are_deterministic_and_events_carry_the_schema():
    plants = [Plant(("bundle-a", "bundle-b"), 0.1, start=6000), Plant(("old-x", "old-y"), 0.1, end=8000)]
    rows = list(baskets(11000, plants, seed=4))
    once, again = replay(rows, [DriftDetector(SETTINGS), DriftDetector(SETTINGS)])
    assert len(once) == 2 and [s.event.id for s in once] == [s.event.id for s in again]
    assert len({s.event.id for s in once}) == len(once)
    for seen in once:
        event = seen.event
        assert event.id == event_id(event.kind, event.tick, event.items)
        assert re.fullmatch(rf"{event.kind}-{event.tick}-[0-9a-f]{{12}}", event.id)
        assert event.tick == seen.end // T - 1  # ticks count from 0, one per 200 baskets
        record = json.loads(json.dumps(event.as_json(), allow_nan=False))
        assert {"event", "id", "tick", "items", "rules", "support", "baseline", "p_value", "window"} <= set(
            record
        )
        assert record["event"] == event.kind and record["items"] == list(event.items)
        assert set(record["baseline"]) >= {"support", "confidence", "lift"}
        assert set(record["window"]) >= {"size", "first_id", "last_id", "end_time"}
        assert record["window"]["size"] == W
        assert record["rules"], record
        for rule in record["rules"]:
            assert set(rule) >= {"antecedent", "consequent", "support", "confidence", "lift"}
            assert sorted(rule["antecedent"] + rule["consequent"]) == record["items"]
            assert rule["confidence"] >= 0.5 and rule["lift"] >= 1.5
        assert record["support"] == pytest.approx(event.count / W)
        assert 0 < record["p_value"] <= SETTINGS.false_discovery_rate
    assert event_id(EMERGED, 38, ("a", "b")) != event_id(EMERGED, 38, ("a", "c"))
    assert event_id(EMERGED, 38, ("a", "b")) != event_id(FADED, 38, ("a", "b"))
    assert event_id(EMERGED, 38, ("a", "b")) != event_id(EMERGED, 39, ("a", "b"))


# ------------------------------------------------------------------ figures by brute force
ALPHABET = "abcdef"
small_baskets = st.lists(st.sets(st.sampled_from(ALPHABET), max_size=5), min_size=1, max_size=40)


def brute_count(rows: Sequence[set[str]]):
    def count_of(items: Iterable[str]) -> int:
        wanted = set(items)
        return sum(1 for row in rows if wanted <= row)

    return count_of


def two_parts(items: tuple[str, ...]) -> list[tuple[tuple[str, ...], tuple[str, ...]]]:
    """Every ordered split of ``items`` into two non-empty parts (both orders)."""
    out = []
    for k in range(1, len(items)):
        for left in combinations(items, k):
            out.append((left, tuple(i for i in items if i not in left)))
    return out


@settings(max_examples=300, deadline=None)
@given(small_baskets, st.sets(st.sampled_from(ALPHABET), min_size=2, max_size=4), st.fractions(0, 1))
def test_pattern_figures_agree_with_brute_force(rows, chosen, min_confidence):
    items = tuple(sorted(chosen))
    n = len(rows)
    count_of = brute_count(rows)
    fig = figures(items, n, lambda names: count_of(names), Fraction(min_confidence))
    count = count_of(items)
    assert (fig.count, fig.n_baskets) == (count, n)
    ordered = two_parts(items)

    def lift(left, right):
        a, b = count_of(left), count_of(right)
        return Fraction(count * n, a * b) if a and b else Fraction(0)

    assert fig.lift == min(lift(left, right) for left, right in ordered)
    left, right, n_left, n_right = fig.weakest
    assert sorted(left + right) == list(items) and not set(left) & set(right)
    assert (n_left, n_right) == (count_of(left), count_of(right)) and lift(left, right) == fig.lift
    confidences = [Fraction(count, count_of(a)) for a, _ in ordered if count_of(a)]
    assert fig.confidence == max(confidences, default=Fraction(0))

    def improves(antecedent, consequent):
        own = Fraction(count, count_of(antecedent))
        return all(
            own > Fraction(count_of(smaller + consequent), count_of(smaller))
            for k in range(1, len(antecedent))
            for smaller in combinations(antecedent, k)
        )

    improving = [(a, c) for a, c in ordered if count_of(a) and improves(a, c)]
    assert fig.improves == bool(improving)
    expected = {
        (a, c, count, count_of(a), count_of(c), n)
        for a, c in improving
        if Fraction(count, count_of(a)) >= min_confidence
    }
    got = {
        (r.antecedent, r.consequent, r.count, r.antecedent_count, r.consequent_count, r.n_baskets)
        for r in fig.rules
    }
    assert got == expected
    assert len(fig.rules) == len(got)  # each rule once


@settings(max_examples=300, deadline=None)
@given(small_baskets, st.sets(st.sampled_from(ALPHABET), min_size=3, max_size=5), st.data())
def test_lift_apart_from_a_larger_pattern_agrees_with_brute_force(rows, chosen, data):
    whole = tuple(sorted(chosen))
    part = tuple(sorted(data.draw(st.sets(st.sampled_from(whole), min_size=2, max_size=len(whole) - 1))))
    rest = set(whole) - set(part)
    kept = [row for row in rows if not rest <= row]  # the baskets without all of the rest
    count_kept = brute_count(kept)
    both, m = count_kept(part), len(kept)
    lifts = []
    for left, right in two_parts(part):
        a, b = count_kept(left), count_kept(right)
        lifts.append(Fraction(both * m, a * b) if a and b and both else Fraction(0))
    assert lift_without(part, whole, len(rows), brute_count(rows)) == min(lifts)


@settings(max_examples=200, deadline=None)
@given(
    st.lists(st.lists(st.sampled_from(ALPHABET), max_size=6), max_size=60),
    st.integers(1, 25),
    st.lists(st.lists(st.sampled_from(ALPHABET + "xy"), max_size=4), max_size=12),
)
def test_window_counts_agree_with_brute_force(rows, size, queries):
    """``WindowMiner.count`` over the last ``size`` non-empty baskets; x and y are unknown
    names (never bought), so any itemset holding one counts 0; the empty itemset counts the
    window."""
    miner = WindowMiner(CountWindow(size))
    for row in rows:
        miner.add(row)
    window = [set(row) for row in rows if row][-size:] if rows else []
    expected = [sum(1 for basket in window if set(query) <= basket) for query in queries]
    assert miner.count(queries) == expected
