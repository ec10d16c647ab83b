"""``stream-miner backtest``: real processes over a planted file, the report's parts, bounded
recording, bad paths.

The planted file and options are those of tests/test_drift_run.py (a bundle from basket
6,000, a pair that stops at basket 8,000; window 2,000, a tick every 200); the events
expected are the engine's own over the same baskets.
"""

from __future__ import annotations

import json
import os
import pty
import re
import subprocess
from html.parser import HTMLParser

import pytest

from drift_streams import RUN_OPTIONS, SETTINGS, replay
from processes import stream_miner
from stream_miner.connectors.dead_letters import DeadLetterCounter
from stream_miner.connectors.file_source import FileSource
from stream_miner.decoding.files import FileLayout
from stream_miner.decoding.messages import MessageFormat
from stream_miner.drift.detector import DriftDetector
from stream_miner.engine.params import MiningParams
from stream_miner.engine.window import CountWindow
from stream_miner.report.page import DATA_ID
from stream_miner.report.recorder import BacktestRecorder
from stream_miner.runtime.runner import Runner, RunSettings
from stream_miner.simulate.planted import Plant, baskets, write_jsonl

N = 11000
PLANTS = [Plant(("bundle-a", "bundle-b"), 0.1, start=6000), Plant(("old-x", "old-y"), 0.1, end=8000)]
SEED = 2
PLANTED = [("emerged", ["bundle-a", "bundle-b"]), ("faded", ["old-x", "old-y"])]
ERROR_LINE = re.compile(r"^stream-miner: error: [^\n]+\n$")


@pytest.fixture(scope="module")
def planted(tmp_path_factory):
    """The planted file and the ids of the events the engine raises over it."""
    path = tmp_path_factory.mktemp("planted") / "baskets.jsonl"
    assert write_jsonl(str(path), baskets(N, PLANTS, seed=SEED)) == N
    [seen] = replay(baskets(N, PLANTS, seed=SEED), [DriftDetector(SETTINGS)])
    assert [(s.event.kind, list(s.event.items)) for s in seen] == PLANTED
    return path, [s.event.id for s in seen]


@pytest.fixture(scope="module")
def reported(planted, tmp_path_factory):
    """One backtest of the planted file: (its JSON, its HTML, the expected event ids)."""
    data, expected = planted
    out = tmp_path_factory.mktemp("report")
    done = subprocess.run(
        backtest(data, "--report", str(out / "r.html"), "--json", str(out / "r.json")),
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, done.stderr
    assert "Traceback" not in done.stderr
    assert "stream-miner: backtest: 1 emerged, 1 faded; written to" in done.stderr
    report = json.loads((out / "r.json").read_text(encoding="utf-8"))
    return report, (out / "r.html").read_text(encoding="utf-8"), expected


def backtest(data, *extra: str) -> list[str]:
    return [*stream_miner(), "backtest", str(data), *RUN_OPTIONS, *extra]


class Page(HTMLParser):
    """What the tests read from the report: the events table's cells, the SVG paths, the
    embedded data, and every attribute value (to look for external addresses)."""

    def __init__(self) -> None:
        super().__init__()
        self.rows: list[list[str]] = []
        self.paths: list[dict[str, str]] = []
        self.markers: list[str] = []
        self.attributes: list[str] = []
        self.embedded = ""
        self._in_events = self._in_cell = self._in_data = False

    def handle_starttag(self, tag, attrs):
        found = {k: v or "" for k, v in attrs}
        self.attributes += [f"{k}={v}" for k, v in found.items()]
        if tag == "table" and found.get("id") == "events":
            self._in_events = True
        elif tag == "tr" and self._in_events:
            self.rows.append([])
        elif tag == "td" and self._in_events:
            self._in_cell = True
            self.rows[-1].append("")
        elif tag == "path" and "series" in found.get("class", ""):
            self.paths.append(found)
        elif tag == "g" and found.get("class", "").startswith("marker"):
            self.markers.append(found["class"])
        elif tag == "script" and found.get("id") == DATA_ID:
            self._in_data = True

    def handle_endtag(self, tag):
        if tag == "table":
            self._in_events = False
        elif tag == "td":
            self._in_cell = False
        elif tag == "script":
            self._in_data = False

    def handle_data(self, data):
        if self._in_cell:
            self.rows[-1][-1] += data
        if self._in_data:
            self.embedded += data


def parsed(html: str) -> Page:
    page = Page()
    page.feed(html)
    page.close()
    return page


def test_json_lists_the_planted_events(reported):
    report, _, expected = reported
    assert [e["id"] for e in report["events"]] == expected
    assert [(e["event"], e["items"]) for e in report["events"]] == PLANTED
    assert [e["baskets"] for e in report["events"]] == [200 * (e["tick"] + 1) for e in report["events"]]
    assert report["detector"] | {"events_per_1000_baskets": None} == {
        "emerged": 1,
        "faded": 1,
        "events_listed": 2,
        "events_left_out": 0,
        "patterns_at_end": {"rising": 0, "active": 1, "falling": 0},
        "events_per_1000_baskets": None,
        "event_time_span_seconds": None,  # a count window: no event time
        "events_per_day": None,
    }
    assert report["run"]["baskets"] == N and report["run"]["ticks"] == N // 200
    assert report["run"]["complete"] is True
    settings = report["settings"]
    assert (settings["window-size"], settings["tick-every"], settings["min-support"]) == (2000, 200, 0.05)
    assert (settings["min-confidence"], settings["min-lift"]) == (0.5, 1.5)
    options = report["run_options"]
    assert all(option in " ".join(options) for option in ("--window-size 2000", "--min-lift 1.5"))
    # both planted patterns are charted first, their events attached, then the others
    charted = [(p["items"], p["events"]) for p in report["patterns"][:2]]
    assert charted == [(items, [i]) for (_, items), i in zip(PLANTED, expected, strict=True)]
    assert [p["state"] for p in report["patterns"][:2]] == ["active", "gone"]


def test_html_table_lists_the_planted_events(reported):
    report, html, _ = reported
    page = parsed(html)
    body = [row for row in page.rows if row]
    assert [(row[2], row[3]) for row in body] == [(kind, " + ".join(items)) for kind, items in PLANTED]
    assert [row[0] for row in body] == [str(e["tick"]) for e in report["events"]]
    assert 'class="sortable" id="events"' in html and 'addEventListener("click"' in html


def test_html_is_self_contained_with_drawn_timelines(reported):
    _, html, _ = reported
    page = parsed(html)
    assert not re.search(r"(?i)\b(?:https?|ftp|wss?):|//[a-z0-9]", html), "an external address"
    assert not [a for a in page.attributes if a.split("=", 1)[0] in ("src", "href", "xmlns")]
    assert "@import" not in html and "url(" not in html
    paths = [p["d"] for p in page.paths]
    drawn = [d for d in paths if len(re.findall(r"[ML]\s*[\d.]+ [\d.]+", d)) >= 2]
    assert len(drawn) >= 5  # support and lift of both planted patterns, and the tick times
    assert sorted(page.markers) == ["marker emerged"] * 2 + ["marker faded"] * 2  # on both charts


def test_json_equals_the_data_in_the_html(reported):
    report, html, _ = reported
    assert json.loads(parsed(html).embedded) == report


def test_json_on_stdout(planted, tmp_path):
    data, expected = planted
    done = subprocess.run(backtest(data, "--json", "-"), capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert [e["id"] for e in json.loads(done.stdout)["events"]] == expected


@pytest.mark.parametrize(
    ("make", "extra", "says"),
    [
        (lambda t: t / "missing.jsonl", ["--json", "{t}/r.json"], "cannot read"),
        (lambda t: t, ["--json", "{t}/r.json", "--format", "jsonl"], "Is a directory"),
        (lambda t: t / "b.unknown", ["--json", "{t}/r.json"], "cannot tell the format"),
        (None, ["--report", "{t}/no/such/dir/r.html"], "does not exist"),
        (None, ["--report", "{t}"], "is a directory"),
        (None, [], "give --report PATH"),
        (None, ["--json", "{t}/same", "--report", "{t}/same"], "the same file"),
        (None, ["--json", "{t}/r.json", "--chart-patterns", "21"], "at most 20"),
    ],
)
def test_bad_paths_and_options_are_one_line_errors(planted, tmp_path, make, extra, says):
    data = planted[0] if make is None else make(tmp_path)
    if make is not None and data.suffix == ".unknown":
        data.write_text('{"id": "b0", "items": ["a"]}\n')
    done = subprocess.run(
        backtest(data, *[part.format(t=tmp_path) for part in extra]),
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert done.returncode == 2
    assert ERROR_LINE.match(done.stderr), done.stderr
    assert says in done.stderr
    assert not (tmp_path / "r.json").exists()


def test_a_malformed_record_stops_with_one_error_line(tmp_path):
    data = tmp_path / "bad.jsonl"
    data.write_text('{"id": "b0", "items": ["a", "b"]}\nnot json\n')
    done = subprocess.run(
        backtest(data, "--json", str(tmp_path / "r.json")), capture_output=True, text=True, timeout=60
    )
    assert done.returncode == 2
    assert "Traceback" not in done.stderr
    last = done.stderr.splitlines()[-1]
    assert last.startswith("stream-miner: error: ") and "bad.jsonl" in last and "--bad-records skip" in last
    assert not (tmp_path / "r.json").exists()


def test_an_input_without_baskets_is_an_error(tmp_path):
    data = tmp_path / "empty.jsonl"
    data.write_text("")
    done = subprocess.run(
        backtest(data, "--json", str(tmp_path / "r.json")), capture_output=True, text=True, timeout=60
    )
    assert done.returncode == 2
    assert done.stderr.splitlines()[-1] == f"stream-miner: error: {data}: no baskets to replay"


def test_recording_stays_bounded(planted):
    """Small caps over the planted replay (tick every 50: 220 ticks): at most ``max_points``
    sampled ticks plus the event ticks, at most ``max_followed`` patterns (those with events
    kept), at most ``max_events`` events listed and the rest counted."""
    data = planted[0]
    recorder = BacktestRecorder(max_points=16, max_followed=3, max_events=1)
    settings = RunSettings(CountWindow(2000), MiningParams(min_support="0.05"), tick_every=50, drift=SETTINGS)
    source = FileSource(str(data), FileLayout("jsonl", MessageFormat()))
    with open(os.devnull, "w") as quiet:
        assert Runner(settings, source, DeadLetterCounter(), [recorder], quiet, silent_ticks=True).run() == 0
    source.close()
    assert recorder.tick_count == N // 50
    assert recorder.every == 16  # 220 ticks: 16 sampled would be exceeded at every 8
    sampled = [row[0] for row in recorder.ticks if row[0] % recorder.every == 0]
    assert 8 < len(sampled) <= 16
    assert {row[0] for row in recorder.ticks} == set(sampled) | recorder.event_ticks
    assert sum(recorder.kinds.values()) == 2 and len(recorder.events) == 1 and recorder.events_left_out == 1
    assert len(recorder.followed) <= 3
    assert ("bundle-a", "bundle-b") in recorder.followed  # its event forced it in, and it stays
    for series in recorder.followed.values():
        assert all(tick % recorder.every == 0 or tick in recorder.event_ticks for tick, *_ in series.points)


@pytest.mark.slow
def test_progress_line_on_a_terminal(tmp_path):
    """On a terminal, stderr carries the runtime's progress line while the replay runs (it is
    redrawn every half second: the replay is long enough for a few)."""
    data = tmp_path / "long.jsonl"
    write_jsonl(str(data), baskets(30000, PLANTS, seed=SEED))
    leader, follower = pty.openpty()
    child = subprocess.Popen(
        backtest(data, "--json", str(tmp_path / "r.json")), stdout=subprocess.DEVNULL, stderr=follower
    )
    os.close(follower)
    seen = b""
    while True:
        try:
            chunk = os.read(leader, 4096)
        except OSError:  # the terminal closed with the child
            break
        if not chunk:
            break
        seen += chunk
    os.close(leader)
    assert child.wait(timeout=120) == 0
    text = seen.decode()
    assert re.search(r"\r\x1b\[Kstream-miner: [\d,]+ baskets, \d+% of file:\S+ read", text), text
    assert "stream-miner: backtest: " in text
