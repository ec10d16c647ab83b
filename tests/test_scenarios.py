"""Scenario files (stream_miner.simulate.scenarios), their ground truth, and the drift-quality
scoring (simulations.drift_quality) on a short scenario."""

from __future__ import annotations

import json
from collections import Counter

import pytest

from simulations.drift_quality import evaluate
from simulations.drift_scoring import FALSE_ALARM, HIT, REDUNDANT, Alarm, score
from stream_miner.simulate.scenarios import bundled, generate, load, parse
from stream_miner.simulate.truth import ground_truth

SETTINGS = {"window_size": 1000, "tick_every": 100, "min_support": 0.03, "min_lift": 1.5}


def scenario(changes=(), **stream):
    return parse(
        {
            "name": "test",
            "stream": {"baskets": 6000, "seed": 5, "catalogue": 200, **stream},
            "settings": SETTINGS,
            "change": list(changes),
        }
    )


def share(baskets, items, begin, end):
    return sum(set(items) <= set(b) for b in baskets[begin:end]) / (end - begin)


def test_the_bundled_scenarios_load_and_cover_every_kind():
    loaded = [load(path) for path in bundled()]
    kinds = Counter(change.kind for s in loaded for change in s.changes)
    assert {"emerge", "fade", "spike", "wave", "burst"} <= set(kinds)
    assert any(change.ramp for s in loaded for change in s.changes if change.kind == "emerge")
    assert any(not s.changes for s in loaded)  # a stationary stream
    assert {s.stream.popularity for s in loaded} == {"heavy-tailed", "quest"}
    assert len({s.name for s in loaded}) == len(loaded) == 7


@pytest.mark.parametrize(
    "text, message",
    [
        ("name = 'x'\n[stream]\nbaskets = 10\n", "[settings] is missing"),
        ("[stream]\nbaskets = 10\nflavour = 1\n[settings]\nwindow_size=1\ntick_every=1\nmin_support=0.1",
         "[stream]: unknown key 'flavour'"),
        ("[stream]\nbaskets = 10\ndays = 1\n[settings]\nwindow_size=1\ntick_every=1\nmin_support=0.1",
         "exactly one of baskets and days"),
        ("[stream]\nbaskets = 10\n[settings]\nwindow_size=1\ntick_every=1\nmin_support=0.1\n"
         "[[change]]\nkind='spike'\nitems=['a','b']\nrate=0.1\nstart=1\nend=2", "a spike is one item"),
        ("[stream]\nbaskets = 10\n[settings]\nwindow_size=1\ntick_every=1\nmin_support=0.1\n"
         "[[change]]\nkind='explode'\nitems=['a','b']\nrate=0.1", "kind must be one of"),
        ("[stream]\nbaskets = 10\n[settings]\nwindow_size=1\ntick_every=1\nmin_support=0.1\n"
         "[[change]]\nkind='emerge'\nitems=['a','b']\nrate=0.1\nstart='soon'",
         "start must be a basket number"),
        ("[stream]\nbaskets = 10\n[settings]\nwindow_size=1\ntick_every=1\nmin_support=0.1\n"
         "[[change]]\nkind='wave'\nitems=['a','b']\nrate=0.1", "a wave needs a period"),
        ("[stream]\nbaskets = 'many'\n", "baskets must be a whole number"),
        ("[stream\n", "not valid toml"),
    ],
)  # fmt: skip
def test_a_bad_file_is_one_line_naming_it(tmp_path, text, message):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    with pytest.raises(ValueError) as raised:
        load(path)
    assert str(raised.value).startswith(f"scenario {str(path)!r}: ")
    assert message in str(raised.value)
    assert "\n" not in str(raised.value)


def test_a_missing_file_and_bad_json_are_one_line(tmp_path):
    with pytest.raises(ValueError, match="cannot read it"):
        load(tmp_path / "nowhere.toml")
    path = tmp_path / "bad.json"
    path.write_text("{")
    with pytest.raises(ValueError, match=r"not valid json") as raised:
        load(path)
    assert "\n" not in str(raised.value)


def test_json_and_toml_give_the_same_scenario(tmp_path):
    data = {"name": "same", "stream": {"baskets": 50, "seed": 1}, "settings": SETTINGS,
            "change": [{"kind": "emerge", "items": ["b", "a"], "rate": 0.1, "start": 20}]}  # fmt: skip
    (tmp_path / "s.json").write_text(json.dumps(data))
    (tmp_path / "s.toml").write_text(
        "name = 'same'\n[stream]\nbaskets = 50\nseed = 1\n[settings]\nwindow_size = 1000\ntick_every = 100\n"
        "min_support = 0.03\nmin_lift = 1.5\n[[change]]\nkind = 'emerge'\nitems = ['b', 'a']\nrate = 0.1\n"
        "start = 20\n"
    )
    from_json, from_toml = load(tmp_path / "s.json"), load(tmp_path / "s.toml")
    assert from_json.changes == from_toml.changes and from_json.changes[0].items == ("a", "b")
    assert from_json.stream == from_toml.stream and from_json.settings == from_toml.settings


def test_generation_is_deterministic_by_seed():
    changes = [{"kind": "emerge", "items": ["x", "y"], "rate": 0.1, "start": 100}]
    for popularity in ("heavy-tailed", "quest"):
        one, two = (
            generate(scenario(changes, popularity=popularity)),
            generate(scenario(changes, popularity=popularity)),
        )
        assert one.baskets == two.baskets and one.times == two.times
        other = generate(scenario(changes, popularity=popularity, seed=6))
        assert other.baskets != one.baskets and other.times != one.times


def test_event_times_follow_the_daily_rhythm_and_a_length_in_days():
    generated = generate(scenario(baskets=None, days=2, per_hour=400, daily_swing=0.8, busiest_hour=17))
    times = generated.times
    assert times == sorted(times) and times[-1] - times[0] < 2 * 86400 <= times[-1] - times[0] + 3600
    hours = Counter(int(ts % 86400 // 3600) for ts in times)
    assert hours[17] > 3 * hours[5]  # busiest hour 17: rate x 1.8; 05:00: rate x 0.2
    assert len(times) == pytest.approx(2 * 24 * 400, rel=0.1)


def test_planted_support_and_crossings_match_the_generated_data():
    changes = [
        {"kind": "emerge", "items": ["fig jam", "oat crackers"], "rate": 0.08, "start": 3000},
        {"kind": "fade", "items": ["chestnuts", "spice"], "rate": 0.08, "end": 3500},
        {"kind": "spike", "items": ["umbrellas"], "rate": 0.3, "start": 2000, "end": 2600},
    ]
    generated = generate(scenario(changes))
    rows = generated.baskets
    emerge, fade, spike = ground_truth(generated)
    assert share(rows, emerge.items, 0, 3000) == 0 and share(rows, fade.items, 3500, 6000) == 0
    assert share(rows, emerge.items, 3000, 6000) == pytest.approx(0.08, abs=0.015)
    assert share(rows, fade.items, 0, 3500) == pytest.approx(0.08, abs=0.015)
    assert share(rows, spike.items, 2000, 2600) == pytest.approx(0.3, abs=0.05)
    assert share(rows, spike.items, 2600, 6000) == 0 and spike.crossings == ()
    (up,) = emerge.crossings
    assert up.kind == "emerged" and up.required and up.baskets > emerge.start
    at = next(p for p in emerge.series if p.baskets == up.baskets)
    before = next(p for p in emerge.series if p.baskets == up.baskets - 100)
    window = rows[up.baskets - 1000 : up.baskets]
    assert at.support == share(window, emerge.items, 0, 1000) >= 0.03 > before.support
    (down,) = fade.crossings
    assert down.kind == "faded" and down.baskets > 3500 - 1000
    assert share(rows[down.baskets - 1000 : down.baskets], fade.items, 0, 1000) < 0.03 * 0.8


def test_positions_may_be_times_after_the_start():
    generated = generate(
        scenario([{"kind": "burst", "items": ["a", "b"], "rate": 0.5, "start": "2h", "end": "3h"}])
    )
    plant, times = generated.plants[0], generated.times
    assert times[plant.start] >= times[0] + 7200 > times[plant.start - 1]
    assert times[plant.end] >= times[0] + 10800 > times[plant.end - 1]


def test_scoring_hits_redundant_and_false_alarms():
    generated = generate(
        scenario([{"kind": "burst", "items": ["a", "b"], "rate": 0.3, "start": 2000, "end": 2500}])
    )
    (truth,) = ground_truth(generated)
    up, down = truth.crossings
    alarms = [
        Alarm("emerged", ("a", "b"), up.baskets + 200),
        Alarm("emerged", ("a", "b"), up.baskets + 300),  # a repeat
        Alarm("emerged", ("a", "b", "item-0001"), up.baskets + 200),  # a superset
        Alarm("faded", ("a", "b"), up.baskets + 100),  # a fade while it emerges
        Alarm("faded", ("a", "b"), down.baskets + 100),
        Alarm("emerged", ("item-0001", "item-0002"), 3000),  # nothing planted
    ]
    scored = score(alarms, [truth], generated, 1000)
    verdicts = {(a.kind, a.items, a.baskets): v for a, v in scored.verdicts}
    assert verdicts[("emerged", ("a", "b"), up.baskets + 200)] == HIT
    assert verdicts[("emerged", ("a", "b"), up.baskets + 300)] == REDUNDANT
    assert verdicts[("emerged", ("a", "b", "item-0001"), up.baskets + 200)] == REDUNDANT
    assert verdicts[("faded", ("a", "b"), up.baskets + 100)] == FALSE_ALARM
    assert verdicts[("faded", ("a", "b"), down.baskets + 100)] == HIT
    assert (scored.hits, scored.redundant, scored.false_alarms) == (2, 2, 2)
    assert scored.delays == [200, 100] and scored.recall == 1.0 and scored.redundant_per_change == 1.0


def test_drift_quality_scores_a_planted_bundle_as_detected(tmp_path):
    bundle = scenario([{"kind": "emerge", "items": ["fig jam", "oat crackers"], "rate": 0.08, "start": 3000}])
    outcome = evaluate(bundle, tmp_path)
    detector, naive = outcome.detector, outcome.naive
    assert detector.required == detector.required_hits == 1
    assert 0 < detector.delays[0] <= 500  # within half a window of the crossing
    assert detector.false_alarms == detector.redundant == 0
    assert naive.redundant >= 1  # both rules of the pair appear: two alarms for one change
    assert (tmp_path / "test-events.jsonl").read_text().count("\n") == detector.alarms
