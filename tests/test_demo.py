"""`stream-miner demo`: a real process that ends by itself, prints the planted changes as they
are found and a summary that matches what was planted, and serves the metrics and the status
page while it runs."""

from __future__ import annotations

import json
import re
import subprocess
import urllib.request
from pathlib import Path

import pytest

from processes import stream_miner, wait_until
from stream_miner.cli.main import main
from stream_miner.simulate.tidemoor import BASKETS, CHANGES

EVENT_LINE = re.compile(r"^(emerged|faded) +(.+?)  support .*, tick \d+$", re.MULTILINE)


def _planted_events() -> list[tuple[str, str]]:
    return [(c.kind, " + ".join(c.items)) for c in CHANGES if c.kind is not None]


def test_demo_ends_by_itself_with_the_planted_changes_found():
    done = subprocess.run(stream_miner("demo", "--speed", "100"), capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    assert "Traceback" not in done.stderr
    out, err = done.stdout, done.stderr
    assert EVENT_LINE.findall(out) == _planted_events()  # printed as they were raised, in order
    summary = out.split("\nSummary after ", 1)[1]
    for change in CHANGES:
        verdict = "right  none" if change.kind is None else f"found  {change.kind}"
        assert re.search(rf"^  {verdict} +{re.escape(' + '.join(change.items))}: planted at", summary, re.M)
    assert summary.rstrip().endswith(
        f"{len(CHANGES)} of {len(CHANGES)} planted changes told right; 0 events not planted."
    )
    assert re.search(r"^stream-miner: metrics on http://127\.0\.0\.1:\d+/metrics$", err, re.M)
    assert re.search(r"^stream-miner: status page on http://127\.0\.0\.1:\d+/$", err, re.M)
    assert re.search(rf"^stream-miner: demo: {BASKETS:,} of {BASKETS:,} baskets \(100%\)", err, re.M)
    assert f"stream-miner: {BASKETS} baskets in the stream" in err
    readme = (Path(__file__).resolve().parent.parent / "README.md").read_text(encoding="utf-8")
    shown = readme.split("what was found against what was planted:\n\n```\n", 1)[1].split("```", 1)[0]
    assert shown == summary.split("\n", 1)[1]  # the README's quick start shows this very summary


def _json(url: str) -> dict:
    with urllib.request.urlopen(url, timeout=10) as answer:
        return json.loads(answer.read())


@pytest.mark.slow
def test_demo_serves_the_status_page_while_it_runs_then_exits(spawn):
    """At --speed 10 one pass takes at least 6 s (the pace): the page is read meanwhile."""
    child = spawn(stream_miner("demo", "--speed", "10"))
    base = child.wait_for_line(r"^stream-miner: status page on (http://127\.0\.0\.1:\d+/)$").group(1)
    served = wait_until(lambda: _json(base + "api/events")["events"], what="a first event", child=child)
    assert (served[0]["event"], served[0]["items"]) == ("emerged", ["crab rolls", "samphire"])
    patterns = _json(base + "api/patterns")
    window = patterns["window"]
    assert window["size"] > 0 and window["end_time"] - window["start_time"] == 5000  # 2,000 baskets x 2.5 s
    assert any(p["items"] == ["crab rolls", "samphire"] for p in patterns["patterns"])
    with urllib.request.urlopen(base + "metrics", timeout=10) as answer:
        assert b'stream_miner_pattern_support{pattern="crab rolls + samphire"}' in answer.read()
    code, err = child.finish(timeout=120)
    assert code == 0, err


def test_demo_forever_goes_on_past_one_pass_until_stopped(spawn):
    child = spawn(stream_miner("demo", "--speed", "100", "--forever"))
    child.wait_for_line(r"^stream-miner: demo: pass 2, ", timeout=120)
    err = child.stop()
    consumed = int(re.search(r"^stream-miner: (\d+) baskets in the stream", err, re.M).group(1))
    assert consumed > BASKETS


@pytest.mark.parametrize("speed", ["0", "-1", "fast", "inf"])
def test_a_speed_that_is_not_a_positive_number_is_refused(capsys, speed):
    with pytest.raises(SystemExit) as exit_:
        main(["demo", "--speed", speed])
    assert exit_.value.code == 2
    assert "--speed: " in capsys.readouterr().err
