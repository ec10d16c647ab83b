"""``stream-miner run --events-out``: real processes over a planted file.

The file (our generator) plants a bundle from basket 6,000 and a pair that stops at basket
8,000; the run uses the issue's options (window 2,000, a tick every 200, support 0.05,
confidence 0.5, lift 1.5). The events expected are the engine's (WindowMiner ticks fed to
DriftDetector over the same baskets), which must be the two planted ones.
"""

from __future__ import annotations

import json
import re
import subprocess

import pytest

from drift_streams import RUN_OPTIONS, SETTINGS, T, W, describe, replay
from processes import Child, stream_miner, wait_until
from stream_miner.drift.detector import DriftDetector
from stream_miner.drift.events import EMERGED, FADED
from stream_miner.simulate.planted import Plant, baskets, write_jsonl

N = 11000
PLANTS = [Plant(("bundle-a", "bundle-b"), 0.1, start=6000), Plant(("old-x", "old-y"), 0.1, end=8000)]
SEED = 2
TICK_LINE = re.compile(r"^stream-miner: tick (\d+): ", re.MULTILINE)
ERROR_LINE = re.compile(r"^stream-miner: error: [^\n]+\n$")


@pytest.fixture(scope="module")
def planted(tmp_path_factory):
    """The planted file (ids b0, b1, ...; every line a basket, none rejected) and the events
    the engine raises over it."""
    path = tmp_path_factory.mktemp("planted") / "baskets.jsonl"
    assert write_jsonl(str(path), baskets(N, PLANTS, seed=SEED)) == N
    [seen] = replay(baskets(N, PLANTS, seed=SEED), [DriftDetector(SETTINGS)])
    kinds = [(s.event.kind, s.event.items) for s in seen]
    assert kinds == [(EMERGED, ("bundle-a", "bundle-b")), (FADED, ("old-x", "old-y"))], describe(seen)
    return path, seen


def run_command(data, *extra: str) -> list[str]:
    return [*stream_miner(), "run", "--source", f"file:{data}", *RUN_OPTIONS, *extra]


def read_events(path) -> list[dict]:
    return [json.loads(line) for line in path.read_text(encoding="utf-8").splitlines()]


def test_events_out_writes_the_planted_events_and_no_others(planted, tmp_path):
    data, expected = planted
    out = tmp_path / "ev.jsonl"
    done = subprocess.run(
        run_command(data, "--events-out", str(out), "--quiet"), capture_output=True, text=True, timeout=120
    )
    assert done.returncode == 0, done.stderr
    assert "Traceback" not in done.stderr
    events = read_events(out)
    assert [e["id"] for e in events] == [s.event.id for s in expected]
    assert [(e["event"], e["items"]) for e in events] == [
        ("emerged", ["bundle-a", "bundle-b"]),
        ("faded", ["old-x", "old-y"]),
    ]
    for event, seen in zip(events, expected, strict=True):
        assert set(event) >= {
            "event",
            "id",
            "tick",
            "items",
            "rules",
            "support",
            "baseline",
            "p_value",
            "window",
        }
        assert set(event["baseline"]) >= {"support", "confidence", "lift"}
        assert event["rules"] and all(
            set(rule) >= {"antecedent", "consequent", "support", "confidence", "lift"}
            for rule in event["rules"]
        )
        assert isinstance(event["p_value"], float) and 0 < event["p_value"] <= SETTINGS.false_discovery_rate
        assert event == seen.event.as_json() | {"window": event["window"]}  # the engine's figures
        k = event["tick"]
        newest = (k + 1) * T - 1  # line number of the newest basket in the window at tick k
        assert event["window"] == {
            "size": W,
            "first_id": f"b{newest - W + 1}",
            "last_id": f"b{newest}",
            "end_time": None,
        }
        line = data.read_text().splitlines()[newest]
        assert json.loads(line)["id"] == event["window"]["last_id"]
    emerged, faded = events
    assert 6000 < (emerged["tick"] + 1) * T <= 6000 + W
    assert 8000 < (faded["tick"] + 1) * T <= 8000 + W


def test_events_on_stdout_as_readable_lines(planted):
    data, expected = planted
    done = subprocess.run(
        run_command(data, "--events-out", "-", "--events-format", "text", "--quiet"),
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, done.stderr
    lines = done.stdout.splitlines()
    assert len(lines) == 2, done.stdout
    emerged, faded = (s.event for s in expected)
    assert re.fullmatch(
        rf"emerged  bundle-a \+ bundle-b  support \d+\.\d% \(baseline (at most )?\d+\.\d%\), "
        rf"confidence 1\.00, lift \d+\.\d\d, p [0-9.e-]+, tick {emerged.tick}",
        lines[0],
    ), lines[0]
    assert re.fullmatch(
        rf"faded    old-x \+ old-y  support \d+\.\d% \(baseline \d+\.\d%\), "
        rf"confidence 1\.00, lift \d+\.\d\d, p [0-9.e-]+, tick {faded.tick}",
        lines[1],
    ), lines[1]
    assert f"support {100 * emerged.support:.1f}%" in lines[0]
    assert "{" not in done.stdout  # no JSON on the readable form


def test_events_out_as_json_on_stdout(planted):
    data, expected = planted
    done = subprocess.run(
        run_command(data, "--events-out", "-", "--quiet"), capture_output=True, text=True, timeout=120
    )
    assert done.returncode == 0, done.stderr
    assert [json.loads(line)["id"] for line in done.stdout.splitlines()] == [s.event.id for s in expected]


def test_text_format_into_a_file_is_a_usage_error(planted, tmp_path):
    data, _ = planted
    out = tmp_path / "ev.txt"
    done = subprocess.run(
        run_command(data, "--events-out", str(out), "--events-format", "text"),
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert done.returncode == 2, done.stderr
    assert ERROR_LINE.fullmatch(done.stderr), done.stderr
    assert "--events-format text" in done.stderr
    assert not out.exists()


def test_events_out_into_a_missing_directory_is_a_usage_error(planted, tmp_path):
    data, _ = planted
    out = tmp_path / "missing" / "ev.jsonl"
    done = subprocess.run(
        run_command(data, "--events-out", str(out)), capture_output=True, text=True, timeout=60
    )
    assert done.returncode == 2, done.stderr
    assert ERROR_LINE.fullmatch(done.stderr), done.stderr
    assert "--events-out" in done.stderr and "does not exist" in done.stderr
    assert not out.parent.exists()


def newest_tick(child: Child) -> int:
    return max((int(k) for k in TICK_LINE.findall(child.stderr)), default=-1)


def event_lines(path) -> int:
    return len(path.read_text(encoding="utf-8").splitlines()) if path.exists() else 0


@pytest.mark.slow
@pytest.mark.parametrize("interval", ["30s", "0"], ids=["checkpoints at events", "checkpoint every loop"])
def test_events_are_written_exactly_once_across_sigkill(planted, tmp_path, spawn, interval):
    data, expected = planted
    out, state = tmp_path / "ev.jsonl", tmp_path / "state"
    command = run_command(
        data,
        "--events-out",
        str(out),
        "--checkpoint-dir",
        str(state),
        "--checkpoint-interval",
        interval,
        "--pace",
        "3000",
    )
    # kill points, in turn, each in whichever process is running when it comes
    kill_points = [
        ("tick 20 (no event yet)", lambda child: newest_tick(child) >= 20),
        ("the emerged event written", lambda child: event_lines(out) >= 1),
        ("tick 42 (between the events)", lambda child: newest_tick(child) >= 42),
        ("the faded event's tick", lambda child: newest_tick(child) >= expected[1].event.tick),
        ("the faded event written", lambda child: event_lines(out) >= 2),
    ]
    kills, runs = [], 0
    while True:
        child = spawn(command)
        runs += 1
        assert runs <= 20, f"still not done after {runs} runs"
        if kill_points:
            name, due = kill_points[0]
            wait_until(
                lambda due=due, child=child: due(child) or child.process.poll() is not None,
                timeout=120,
                what=name,
                child=child,
                every=0.01,
            )
            if child.process.poll() is None:
                child.kill()
                kills.append(name)
                kill_points.pop(0)
                continue
        code, err = child.finish(timeout=120)
        assert code == 0, err
        assert "Traceback" not in err
        break
    assert len(kills) >= 4, kills  # the run is slow enough for the kill points to come
    events = read_events(out)
    assert [e["id"] for e in events] == [s.event.id for s in expected], (kills, events)
    assert events == [
        s.event.as_json() | {"window": e["window"]} for s, e in zip(expected, events, strict=True)
    ]

    straight = tmp_path / "straight.jsonl"
    done = subprocess.run(
        run_command(data, "--events-out", str(straight), "--checkpoint-dir", str(tmp_path / "straight")),
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == 0, done.stderr
    assert out.read_text(encoding="utf-8") == straight.read_text(encoding="utf-8")


def test_the_readme_example_is_what_the_tool_prints():
    """The README's drift example (the bundled market's two planted changes) matches a run."""
    from pathlib import Path

    readme = (Path(__file__).resolve().parent.parent / "README.md").read_text(encoding="utf-8")
    shown = readme.split("prints the two changes planted in it:\n\n```\n", 1)[1].split("```", 1)[0]
    bundled = Path(__file__).resolve().parent.parent / "stream_miner" / "data" / "larkspur_market.jsonl"
    command = stream_miner(
        "run", "--source", f"file:{bundled}", "--window-size", "500", "--tick-every", "100",
        "--min-support", "0.05", "--min-confidence", "0.5", "--min-lift", "1.5",
        "--events-out", "-", "--events-format", "text", "--quiet",
    )  # fmt: skip
    printed = subprocess.run(command, check=True, capture_output=True, text=True, timeout=120).stdout
    assert printed == shown
    example = readme.split("this one is the first event of the command above:\n\n```json\n", 1)[1]
    as_json = command[: command.index("--events-format")] + ["--quiet"]
    first = subprocess.run(as_json, check=True, capture_output=True, text=True, timeout=120).stdout
    assert json.loads(example.split("```", 1)[0]) == json.loads(first.splitlines()[0])
