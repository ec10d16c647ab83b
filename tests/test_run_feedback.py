"""What `run` (and `mine`) tell the user: a line per tick, checked output paths, warnings
about input that is mostly set aside, a cap on combinatorial blow-up, signals that stop a
long mine at once, an unreachable broker, and the deprecated option names."""

from __future__ import annotations

import argparse
import json
import random
import signal
import socket
import time

import psutil
import pytest

from processes import stream_miner, wait_until
from stream_miner.cli.main import build_parser, main


def write_checkouts(path, n, *, with_times=True, seed=3):
    rnd = random.Random(seed)
    goods = [f"g{i}" for i in range(10)]
    lines = []
    for i in range(n):
        record = {"id": f"c{i}", "items": sorted(set(rnd.sample(goods, rnd.randint(1, 4))))}
        if with_times:
            record["ts"] = 1_700_000_000 + 60 * i
        lines.append(json.dumps(record))
    path.write_text("\n".join(lines) + "\n")
    return path


def run(capsys, *args):
    code = main(["run", *map(str, args)])
    return code, capsys.readouterr().err


def test_a_line_per_tick_and_quiet_turns_it_off(tmp_path, capsys):
    data = write_checkouts(tmp_path / "in.jsonl", 250)
    common = ["--source", f"file:{data}", "--window-size", 100, "--tick-every", 100, "--min-support", "0.2"]
    code, err = run(capsys, *common)
    assert code == 0
    ticks = [line for line in err.splitlines() if line.startswith("stream-miner: tick ")]
    assert [line.split(":")[1].strip() for line in ticks] == ["tick 0", "tick 1", "tick 2"]
    assert all("window 100 baskets" in line and "itemsets (+" in line for line in ticks)
    assert "250 baskets in the stream; 3 ticks" in err
    code, err = run(capsys, *common, "--quiet")
    assert code == 0 and "stream-miner: tick " not in err and "3 ticks" in err


def test_time_window_ticks_show_the_span(tmp_path, capsys):
    data = write_checkouts(tmp_path / "in.jsonl", 120)
    code, err = run(capsys, "--source", f"file:{data}", "--window-time", "1h", "--tick-every", 60)
    assert code == 0
    first = next(line for line in err.splitlines() if line.startswith("stream-miner: tick 0:"))
    assert "window 60 baskets [2023-11-14 " in first and " UTC]" in first


@pytest.mark.parametrize(
    "option, make, message",
    [
        ("--snapshot-out", lambda d: d / "missing" / "snap.jsonl", "does not exist"),
        ("--snapshot-out", lambda d: d, "is a directory"),
        ("--dead-letter-out", lambda d: d, "is a directory"),
        ("--checkpoint-dir", lambda d: d / "in.jsonl", "is a file"),
    ],
)
def test_unusable_output_paths_stop_before_reading(tmp_path, capsys, option, make, message):
    data = write_checkouts(tmp_path / "in.jsonl", 20)
    code, err = run(
        capsys, "--source", f"file:{data}", "--window-size", 10, "--tick-every", 5, option, make(tmp_path)
    )
    assert code == 2
    assert err.count("\n") == 1 and option in err and message in err and "Traceback" not in err


def test_mostly_dead_lettered_input_gets_a_warning_with_a_hint(tmp_path, capsys):
    data = write_checkouts(tmp_path / "in.jsonl", 150, with_times=False)
    code, err = run(capsys, "--source", f"file:{data}", "--window-time", "1h", "--tick-every", 10)
    assert code == 0
    warnings = [line for line in err.splitlines() if "warning" in line]
    assert len(warnings) == 1
    assert "150 of 150 records were set aside as 'no event time'" in warnings[0]
    assert "--window-size" in warnings[0]


def test_a_clean_stream_gets_no_warning(tmp_path, capsys):
    data = write_checkouts(tmp_path / "in.jsonl", 150)
    code, err = run(capsys, "--source", f"file:{data}", "--window-time", "1h", "--tick-every", 50)
    assert code == 0 and "warning" not in err


def run_over_a_window_of_ten(data):
    return [
        "run",
        "--source",
        f"file:{data}",
        "--format",
        "fimi",
        "--window-size",
        "10",
        "--tick-every",
        "10",
    ]


def write_wide_baskets(path, n_baskets, n_items):
    """Identical baskets of ``n_items`` items: every subset is frequent at a count of one."""
    basket = [f"item{i:02d}" for i in range(n_items)]
    path.write_text("".join(" ".join(basket) + "\n" for _ in range(n_baskets)))
    return path


@pytest.mark.parametrize("command", ["mine", "run"])
def test_a_combinatorial_blow_up_stops_with_a_clear_message(tmp_path, command, spawn):
    # A 10-basket window at a count of one over baskets of 32 items: 2^32 - 1 itemsets.
    data = write_wide_baskets(tmp_path / "wide.dat", 10, 32)
    if command == "mine":
        args = ["mine", str(data), "--window-size", "10", "--json"]
    else:
        args = run_over_a_window_of_ten(data)
    code, err = spawn([*stream_miner(), *args, "--min-count", "1"]).finish(timeout=60)
    assert code == 2
    errors = [line for line in err.splitlines() if "error" in line]
    assert len(errors) == 1 and "--min-support" in errors[0] and "--max-size" in errors[0], err
    assert "Traceback" not in err


@pytest.mark.slow
@pytest.mark.parametrize("command, exit_code", [("run", 0), ("mine", 128 + signal.SIGTERM)])
def test_sigterm_stops_a_long_mine_within_a_second(tmp_path, command, exit_code, spawn):
    # Every subset of up to 7 of 26 items: 971,711 itemsets, under the default cap, and
    # seconds of work in either kind of tick, unless interrupted.
    data = write_wide_baskets(tmp_path / "wide.dat", 10, 26)
    limits = ["--min-count", "1", "--max-size", "7"]
    if command == "run":
        args = run_over_a_window_of_ten(data)
        child = spawn([*stream_miner(), *args, *limits])
        child.wait_ready()
    else:
        child = spawn([*stream_miner(), "mine", str(data), "--json", *limits])
    process = psutil.Process(child.process.pid)
    started = sum(process.cpu_times()[:2])
    # Reading ten lines costs no CPU to speak of: a further second of CPU is the mine at work.
    wait_until(lambda: sum(process.cpu_times()[:2]) > started + 1.0, what="the mine to be busy", child=child)
    child.send_signal(signal.SIGTERM)
    signalled = time.monotonic()
    code, err = child.finish(timeout=30)
    assert time.monotonic() - signalled < 1.0, err
    assert code == exit_code, err
    assert ("stopped during a tick" if command == "run" else "interrupted") in err


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


@pytest.mark.slow
def test_an_unreachable_broker_is_reported_and_retried_until_sigterm(tmp_path, spawn):
    port = free_port()  # nothing listens there
    child = spawn(
        [
            *stream_miner(),
            "run",
            "--source",
            f"kafka://127.0.0.1:{port}/checkouts",
            "--group",
            "g",
            "--window-size",
            "10",
            "--tick-every",
            "5",
        ]
    )
    first = child.wait_for_line(
        r"cannot reach Kafka at 127\.0\.0\.1:\d+ \(.*refused.*\); retrying in", timeout=30
    )
    assert first
    child.wait_for_line(r"retrying in 2 s", timeout=30)  # the wait doubles
    child.send_signal(signal.SIGTERM)
    signalled = time.monotonic()
    code, err = child.finish(timeout=30)
    assert code == 0, err
    assert time.monotonic() - signalled < 2.0
    assert "Traceback" not in err


def test_old_option_names_still_work_with_a_note(tmp_path, capsys):
    data = tmp_path / "b.dat"
    data.write_text("a b\na\nb a\nc\n")
    assert (
        main(
            [
                "mine",
                str(data),
                "--window",
                "3",
                "--every",
                "2",
                "--max-len",
                "1",
                "--min-count",
                "2",
                "--json",
            ]
        )
        == 0
    )
    out, err = capsys.readouterr()
    for old, new in (("--window", "--window-size"), ("--every", "--tick-every"), ("--max-len", "--max-size")):
        assert f"{old} is deprecated, use {new}" in err
    assert {json.loads(line)["tick"] for line in out.splitlines()} == {0, 1}
    assert all(len(json.loads(line)["items"]) == 1 for line in out.splitlines())
    assert main(["mine", str(data), "--on-bad-input", "fail", "--min-count", "2"]) == 0
    assert "--on-bad-input is deprecated, use --bad-records" in capsys.readouterr().err


def test_help_hides_the_old_names_and_explains_every_option(capsys):
    parser = build_parser()
    commands = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    for name in ("mine", "run"):
        with pytest.raises(SystemExit):
            main([name, "--help"])
        text = capsys.readouterr().out
        for old in ("--window ", "--every ", "--max-len", "--on-bad-input"):
            assert old not in text
        for action in commands.choices[name]._actions:
            if action.help != argparse.SUPPRESS and action.option_strings:
                assert action.help, f"{name} {action.option_strings[0]} has no help text"


def test_version(capsys):
    from stream_miner import __version__

    with pytest.raises(SystemExit):
        main(["--version"])
    assert capsys.readouterr().out.strip() == f"stream-miner {__version__}"
