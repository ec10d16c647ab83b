"""The status page: the board's bounded history and its reads under concurrent ticks, the
HTML (self-contained, well formed), and its JSON served by a real `stream-miner run` over a
planted file, read over real HTTP."""

from __future__ import annotations

import json
import re
import sys
import threading
import urllib.error
import urllib.request
from dataclasses import replace
from html.parser import HTMLParser

import pytest

from drift_streams import RUN_OPTIONS
from processes import stream_miner, wait_until
from stream_miner.drift.events import ACTIVE, EMERGED, FADED, Baseline, DriftEvent, PatternStatus, WindowInfo
from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.window import CountWindow
from stream_miner.runtime.protocols import TickReport
from stream_miner.simulate.planted import Plant, baskets, write_jsonl
from stream_miner.status import StatusBoard
from stream_miner.status.page import page

N = 11000
PLANTS = [Plant(("bundle-a", "bundle-b"), 0.1, start=6000), Plant(("old-x", "old-y"), 0.1, end=8000)]
SEED = 2  # the stream and seed of test_drift_run: the engine raises exactly these two events


# ------------------------------------------------------------------ the board
def _tick():
    miner = WindowMiner(CountWindow(10))
    for basket in (["tea", "scone"], ["tea", "scone", "jam"], ["tea"]):
        miner.add(basket)
    return miner.tick(MiningParams(min_count=1))


TICK = _tick()


def _report(number: int, patterns=(), events=(), consumed=0) -> TickReport:
    return TickReport(
        replace(TICK, number=number),
        consumed,
        "secret-basket-id",
        None,
        None,
        0.001,
        0.002,
        tuple(events),
        tuple(patterns),
    )


def _pattern(name: str, count: int) -> PatternStatus:
    return PatternStatus((name, "z"), ACTIVE, count, 1000, 0.5, 1.0 + count / 100)


def _event(kind: str, tick: int, name: str) -> DriftEvent:
    return DriftEvent(
        kind=kind,
        id=f"{kind}-{tick}",
        tick=tick,
        items=(name, "z"),
        rules=(),
        count=60,
        n_baskets=1000,
        baseline=Baseline(10, 1000, None, None, False),
        p_value=0.001,
        window=WindowInfo(1000, "loyalty-4711", "loyalty-4712", None),
    )


def test_history_and_events_are_bounded_and_untracked_patterns_are_dropped():
    board = StatusBoard(history=4, keep_events=3, shown=2)
    for t in range(10):
        patterns = [_pattern("a", 100 + t), _pattern("b", 50)] + ([_pattern("c", 10)] if t < 5 else [])
        board.on_tick(_report(t, patterns, [_event(EMERGED if t % 2 else FADED, t, "a")], consumed=100 * t))
    served = board.patterns()
    assert served["tracked"] == 2  # c left the tracked patterns at tick 5
    assert [p["items"] for p in served["patterns"]] == [["a", "z"], ["b", "z"]]
    a = served["patterns"][0]
    assert a["history"]["support"] == [(100 + t) / 1000 for t in range(6, 10)]  # the last 4 ticks
    assert len(a["history"]["ticks"]) == len(a["history"]["lift"]) == 4
    assert a["support"] == a["history"]["support"][-1] and a["count"] == 109
    events = board.events()
    assert [e["id"] for e in events["events"]] == ["emerged-9", "faded-8", "emerged-7"]  # newest first
    assert events["totals"] == {"emerged": 5, "faded": 5}  # every event seen, not only those kept
    text = json.dumps([served, events])
    assert "loyalty-47" not in text and "secret-basket-id" not in text  # no basket ids served
    assert events["events"][0]["window"] == {"size": 1000, "end_time": None}


def test_reads_during_ticks_always_see_one_whole_tick():
    """A reader thread reads while ticks are written: every read's histories end at the
    served tick, are consecutive, and never exceed the bound."""
    board = StatusBoard(history=5)
    done = threading.Event()
    problems: list[str] = []

    def read() -> None:
        try:
            check()
        except Exception as error:  # a torn read may also raise: the test shows it
            problems.append(repr(error))

    def check() -> None:
        while not done.is_set():
            served = board.patterns()
            for pattern in served["patterns"]:
                ticks = pattern["history"]["ticks"]
                if ticks[-1] != served["tick"] or ticks != list(range(ticks[0], ticks[0] + len(ticks))):
                    problems.append(f"tick {served['tick']}: {ticks}")
                if len(ticks) > 5 or len(pattern["history"]["support"]) != len(ticks):
                    problems.append(f"tick {served['tick']}: {len(ticks)} points")
            json.dumps(board.events())

    reader = threading.Thread(target=read)
    switch = sys.getswitchinterval()
    sys.setswitchinterval(1e-6)  # threads take turns as often as they can: a torn read shows
    reader.start()
    try:
        for t in range(3000):
            board.on_tick(
                _report(t, [_pattern(f"p{k}", 10 + k) for k in range(t % 7)], [_event(EMERGED, t, "q")])
            )
    finally:
        done.set()
        reader.join()
        sys.setswitchinterval(switch)
    assert problems == []


@pytest.mark.parametrize("option", ["history", "keep_events", "shown"])
def test_board_bounds_must_be_positive(option):
    with pytest.raises(ValueError, match=f"{option} must be at least 1"):
        StatusBoard(**{option: 0})


# ------------------------------------------------------------------ the page
class _Tags(HTMLParser):
    """Start and end tags in order, with the attributes of each start tag."""

    VOID = frozenset({"meta", "link", "br", "img", "input", "hr"})

    def __init__(self) -> None:
        super().__init__()
        self.open: list[str] = []
        self.problems: list[str] = []
        self.attributes: list[tuple[str, dict]] = []

    def handle_starttag(self, tag, attrs):
        self.attributes.append((tag, dict(attrs)))
        if tag not in self.VOID:
            self.open.append(tag)

    def handle_endtag(self, tag):
        if not self.open or self.open[-1] != tag:
            self.problems.append(f"</{tag}> closes {self.open[-1:] or 'nothing'}")
        else:
            self.open.pop()


def test_page_is_self_contained_and_well_formed():
    html = page().decode("utf-8")
    assert not re.search(r"https?:|//[a-z0-9.-]+\.[a-z]{2,}|@import|url\(", html, re.IGNORECASE)
    tags = _Tags()
    tags.feed(html)
    tags.close()
    assert tags.problems == [] and tags.open == []
    for tag, attributes in tags.attributes:
        assert "src" not in attributes and "href" not in attributes, (tag, attributes)
    assert [tag for tag, _ in tags.attributes].count("script") == 1
    assert "api/patterns" in html and "api/events" in html
    assert "innerHTML" not in html  # item names are set as text, never as markup


# ------------------------------------------------------------------ a real run
def _get(url: str) -> tuple[int, str, bytes]:
    try:
        with urllib.request.urlopen(url, timeout=10) as answer:
            return answer.status, answer.headers["Content-Type"], answer.read()
    except urllib.error.HTTPError as error:
        return error.code, error.headers["Content-Type"], error.read()


def _json(url: str) -> dict:
    code, kind, body = _get(url)
    assert code == 200 and kind == "application/json; charset=utf-8"
    return json.loads(body)


def test_run_serves_the_page_and_the_planted_changes_as_json(tmp_path, spawn):
    data = tmp_path / "planted.jsonl"
    assert write_jsonl(str(data), baskets(N, PLANTS, seed=SEED)) == N
    child = spawn(
        stream_miner("run", "--source", f"file:{data}", "--follow", *RUN_OPTIONS, "--metrics-port", "0")
    )
    base = child.wait_for_line(r"^stream-miner: status page on (http://127\.0\.0\.1:\d+/)$").group(1)
    assert re.search(rf"^stream-miner: metrics on {re.escape(base)}metrics$", child.stderr, re.MULTILINE)

    def all_read():
        served = _json(base + "api/patterns")
        return served if served["window"] and served["window"]["consumed"] == N else None

    patterns = wait_until(all_read, what="every basket counted", child=child)
    events = _json(base + "api/events")
    assert [(e["event"], e["items"]) for e in events["events"]] == [
        ("faded", ["old-x", "old-y"]),
        ("emerged", ["bundle-a", "bundle-b"]),
    ]
    assert events["totals"] == {"emerged": 1, "faded": 1}
    assert all(set(e["window"]) == {"size", "end_time"} for e in events["events"])  # no basket ids
    assert patterns["tick"] == N // 200 - 1 and patterns["window"]["size"] == 2000
    [bundle] = [p for p in patterns["patterns"] if p["items"] == ["bundle-a", "bundle-b"]]
    assert bundle["state"] == "active" and bundle["lift"] >= 1.5
    history = bundle["history"]
    emerged_at = events["events"][1]["tick"]
    assert history["ticks"][-1] == patterns["tick"] and history["ticks"][0] <= emerged_at  # tracked since
    assert history["ticks"] == list(range(history["ticks"][0], patterns["tick"] + 1))
    assert history["support"][-1] == bundle["support"] and history["lift"][-1] == bundle["lift"]
    assert all(p["items"] != ["old-x", "old-y"] for p in patterns["patterns"])  # faded: no longer tracked
    code, kind, body = _get(base)
    assert (code, kind, body) == (200, "text/html; charset=utf-8", page())
    assert _get(base + "metrics")[0] == 200
    assert _get(base + "api/nothing")[0] == 404
    child.stop()
