"""The status page and the backtest report in a real headless Chromium (tests/browser.py).

Each page must load with no script error, draw its charts (drawn SVG elements with a size,
and pixels of a screenshot inside a chart that differ from its background), and list the
planted changes; the live page must change between two reads while the stream runs, and the
report's events table must sort on a click. The screenshots in docs/images are these tests'
own: ``STREAM_MINER_SCREENSHOTS=docs/images python -m pytest tests/test_browser_pages.py``.
"""

from __future__ import annotations

import io
import json
import subprocess
from collections import Counter
from pathlib import Path

import pytest
from PIL import Image

from browser import Browser, screenshot_path
from drift_streams import RUN_OPTIONS, SETTINGS, replay
from processes import stream_miner, wait_until
from stream_miner.drift.detector import DriftDetector
from stream_miner.simulate.planted import Plant, baskets, write_jsonl
from stream_miner.simulate.tidemoor import CHANGES

pytestmark = pytest.mark.browser

# A stream of our own for the report (not test_backtest's): a pair that appears, one that stops.
N = 10_000
SEED = 5
PLANTS = [
    Plant(("lamp oil", "wick trimmers"), 0.12, start=5_000),
    Plant(("tide charts", "chalk"), 0.1, end=7_000),
]


@pytest.fixture
def browser(tmp_path):
    opened = Browser(tmp_path / "chromium-profile")
    yield opened
    opened.close()


def drawn_pixels(png: bytes, box: dict[str, float]) -> int:
    """How many pixels inside ``box`` (CSS pixels; the screenshot is at scale 1) differ from
    the colour most of the box has (its background)."""
    image = Image.open(io.BytesIO(png)).convert("RGB")
    left, top = int(box["x"]), int(box["y"])
    region = image.crop((left, top, left + int(box["width"]), top + int(box["height"])))
    colours = Counter(region.get_flattened_data())
    _, count = colours.most_common(1)[0]  # the background
    return region.width * region.height - count


# Every SVG line the page drew that has a real size on screen: [selector, width, height, box].
DRAWN = """
[...document.querySelectorAll(%s)].map((e) => {
  const r = e.getBoundingClientRect(), s = e.ownerSVGElement.getBoundingClientRect();
  const box = {x: s.x + scrollX, y: s.y + scrollY, width: s.width, height: s.height};
  return {w: r.width, h: r.height, box: box};
}).filter((d) => d.w > 2)
"""
ROWS = "[...document.querySelectorAll('#events tbody tr')].map((r) => [...r.cells].map((c) => c.textContent))"


# ------------------------------------------------------------------ the live status page
def test_status_page_of_a_running_demo(spawn, browser, tmp_path):
    child = spawn(stream_miner("demo", "--speed", "10", "--forever"))
    address = child.wait_for_line(r"^stream-miner: status page on (http://127\.0\.0\.1:\d+/)$").group(1)
    browser.open(address)

    def tick_shown() -> str | None:
        shown = browser.evaluate("document.getElementById('state').textContent")
        return shown if shown.startswith("tick ") else None

    first = wait_until(tick_shown, timeout=60, what="a tick on the page", child=child)
    wait_until(
        lambda: tick_shown() not in (None, first), timeout=60, what=f"the page to move on from {first!r}"
    )

    planted = {(c.kind, " + ".join(c.items)) for c in CHANGES if c.kind is not None}

    def listed() -> set[tuple[str, str]]:
        rows = browser.evaluate(ROWS.replace("#events tbody", "#events"))
        return {(row[0], row[1]) for row in rows if len(row) > 2}

    wait_until(
        lambda: planted <= listed(), timeout=120, what=lambda: f"{planted} on the page; it lists {listed()}"
    )
    assert not {items for _, items in listed()} & {"harbour cider"}  # the lone popular item raised nothing
    lines = browser.evaluate(DRAWN % json.dumps("svg.spark polyline"))
    rows = browser.evaluate("document.querySelectorAll('#patterns tr').length")
    assert rows >= 2 and len(lines) >= 2 * rows - 2  # a support and a lift line for (nearly) every pattern
    png = browser.screenshot(screenshot_path(tmp_path, "status-page.png"))
    assert max(drawn_pixels(png, line["box"]) for line in lines) >= 40
    assert browser.errors == []
    child.stop()


def test_status_page_says_when_the_run_is_gone(spawn, browser):
    """The page keeps what it showed and says it cannot read the run; no script error."""
    child = spawn(stream_miner("demo", "--speed", "100", "--forever"))
    address = child.wait_for_line(r"^stream-miner: status page on (http://127\.0\.0\.1:\d+/)$").group(1)
    browser.open(address)
    state = "document.getElementById('state')"
    wait_until(
        lambda: browser.evaluate(f"{state}.textContent").startswith("tick "), what="a tick on the page"
    )
    child.stop()
    wait_until(
        lambda: browser.evaluate(f"{state}.className") == "stale", timeout=30, what="the page to go stale"
    )
    assert browser.evaluate(f"{state}.textContent").startswith("cannot read the run (")
    assert browser.evaluate("document.querySelectorAll('#window .figure').length") > 0
    assert [e for e in browser.errors if not e.startswith("log: Failed to load resource")] == []


# ------------------------------------------------------------------ the backtest report
@pytest.fixture(scope="module")
def report(tmp_path_factory) -> tuple[Path, list[tuple[str, str]]]:
    """A backtest report of our own planted stream and the events the engine raises over it."""
    folder = tmp_path_factory.mktemp("report")
    data = folder / "baskets.jsonl"
    assert write_jsonl(str(data), baskets(N, PLANTS, seed=SEED)) == N
    [seen] = replay(baskets(N, PLANTS, seed=SEED), [DriftDetector(SETTINGS)])
    expected = [(s.event.kind, " + ".join(s.event.items)) for s in seen]
    assert {items for _, items in expected} == {" + ".join(sorted(p.items)) for p in PLANTS}
    page = folder / "report.html"
    command = [*stream_miner(), "backtest", str(data), *RUN_OPTIONS, "--report", str(page)]
    done = subprocess.run(command, capture_output=True, text=True, timeout=180)
    assert done.returncode == 0, done.stderr
    return page, expected


def test_backtest_report_renders_its_charts_and_events(browser, report, tmp_path):
    page, expected = report
    browser.open(page.as_uri())
    rows = browser.evaluate(ROWS)
    assert [(row[2], row[3]) for row in rows] == expected
    lines = browser.evaluate(DRAWN % json.dumps("svg.chart path"))
    assert len(lines) >= 5  # support and lift of both planted patterns, and the tick times
    markers = browser.evaluate("document.querySelectorAll('svg.chart .marker').length")
    assert markers == 2 * len(expected)  # each event on the support chart and on the lift chart
    png = browser.screenshot(screenshot_path(tmp_path, "backtest-report.png"))
    assert min(drawn_pixels(png, line["box"]) for line in lines) >= 100
    assert browser.errors == []


def test_backtest_events_table_sorts_on_a_click(browser, report):
    page, expected = report
    browser.open(page.as_uri())
    heads = browser.evaluate("[...document.querySelectorAll('#events th')].map((h) => h.textContent)")
    items = heads.index("items")
    click = f"document.querySelectorAll('#events th')[{items}].click()"
    browser.evaluate(click)
    ascending = [row[items] for row in browser.evaluate(ROWS)]
    assert ascending == sorted(items for _, items in expected)
    browser.evaluate(click)
    assert [row[items] for row in browser.evaluate(ROWS)] == sorted(ascending, reverse=True)
    sorted_by = f"document.querySelectorAll('#events th')[{items}].getAttribute('aria-sort')"
    assert browser.evaluate(sorted_by) == "descending"
    assert browser.errors == []
