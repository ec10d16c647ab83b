"""Checks `run` makes before and while it reads: a checkpoint of another source, the TOML
config's value kinds, Kafka addresses and client options, the format of a file, and a
stdin that stays open but quiet."""

from __future__ import annotations

import json
import signal
import subprocess
import time

import pytest

from processes import stream_miner
from stream_miner import CountWindow, TimeWindow, WindowMiner, save_checkpoint
from stream_miner.cli.main import main


def baskets_file(path, n=30):
    path.write_text(
        "".join(json.dumps({"id": f"c{i}", "items": ["tea", f"g{i % 3}"]}) + "\n" for i in range(n))
    )
    return path


def run(capsys, *args):
    code = main(["run", *map(str, args)])
    return code, capsys.readouterr().err


def test_a_checkpoint_of_another_source_is_refused(tmp_path, capsys):
    first, second = baskets_file(tmp_path / "a.jsonl"), baskets_file(tmp_path / "b.jsonl")
    common = ["--window-size", 10, "--tick-every", 10, "--checkpoint-dir", tmp_path / "ck"]
    assert run(capsys, "--source", f"file:{first}", *common)[0] == 0
    code, err = run(capsys, "--source", f"file:{second}", *common)
    assert code == 2
    assert (
        f"made reading file:{first}" in err
        and f"this run reads file:{second}" in err
        and "--start-fresh" in err
    )


def test_a_checkpoint_without_run_state_is_refused(tmp_path, capsys):
    save_checkpoint(tmp_path / "ck", WindowMiner(CountWindow(10)), {"source offset": 7})
    code, err = run(
        capsys,
        "--source",
        f"file:{baskets_file(tmp_path / 'a.jsonl')}",
        "--window-size",
        10,
        "--tick-every",
        10,
        "--checkpoint-dir",
        tmp_path / "ck",
    )
    assert code == 2 and "holds no run state" in err and "Traceback" not in err


@pytest.mark.parametrize(
    "line, message",
    [
        ('include = "pasta"', "include must be a list of strings"),
        ("window-size = true", "window-size must be a string or a number"),
        ('late = "bogus"', "late must be one of dead-letter, drop"),
        ('quiet = "no"', "quiet must be true or false"),
        ("group = [1, 2]", "group must be a string or a number"),
    ],
)
def test_config_values_of_the_wrong_kind_are_refused(tmp_path, capsys, line, message):
    config = tmp_path / "run.toml"
    config.write_text(f'source = "file:{baskets_file(tmp_path / "a.jsonl")}"\ntick-every = 10\n{line}\n')
    code, err = run(capsys, "--config", config, "--window-size", 10)
    assert code == 2 and message in err and err.count("\n") == 1


def test_abbreviated_options_are_not_guessed(tmp_path, capsys):
    with pytest.raises(SystemExit):
        main(["run", "--conf", str(tmp_path / "run.toml")])
    assert "unrecognized arguments: --conf" in capsys.readouterr().err


@pytest.mark.parametrize(
    "args, message",
    [
        (["--source", "kafka://localhost/t", "--group", "g"], "kafka://HOST:PORT/TOPIC"),
        (
            ["--source", "kafka://127.0.0.1:9/t", "--group", "g", "--kafka-option", "group_id=x"],
            "set by --group",
        ),
        (
            ["--source", "kafka://127.0.0.1:9/t", "--group", "g", "--kafka-option", "bootstrap_servers=a:1"],
            "address",
        ),
    ],
)
def test_kafka_addresses_and_reserved_options_are_usage_errors(capsys, args, message):
    code, err = run(capsys, *args, "--window-size", 10, "--tick-every", 10)
    assert code == 2 and message in err and err.count("\n") == 1


def test_run_reads_a_file_in_the_format_its_name_says(tmp_path, capsys):
    data = tmp_path / "b.dat"
    data.write_text("tea jam\ntea\njam scone\n")
    code, err = run(
        capsys, "--source", f"file:{data}", "--window-size", 10, "--tick-every", 10, "--min-count", 1
    )
    assert code == 0 and "3 baskets in the stream" in err and "dead letters" not in err


def test_windows_refuse_values_of_the_wrong_kind():
    for bad in (
        lambda: CountWindow(2.5),
        lambda: CountWindow(True),
        lambda: TimeWindow("1h"),
        lambda: TimeWindow(float("inf")),
        lambda: WindowMiner(6),
    ):
        with pytest.raises(ValueError):
            bad()


@pytest.mark.slow
@pytest.mark.parametrize("command", ["run", "mine"])
def test_sigterm_stops_a_reader_of_a_quiet_open_stdin(command):
    # each prints a tick once the first basket is in, on stderr (run) or stdout (mine --json)
    tail = ["--source", "-"] if command == "run" else ["-", "--format", "jsonl", "--json"]
    args = [command, *tail, "--window-size", "10", "--tick-every", "1", "--min-count", "1"]
    child = subprocess.Popen(
        [*stream_miner(), *args], stdin=subprocess.PIPE, stderr=subprocess.PIPE, stdout=subprocess.PIPE
    )
    assert child.stdin is not None and child.stderr is not None and child.stdout is not None
    child.stdin.write(b'{"items": ["tea", "jam"]}\n')
    child.stdin.flush()  # and keep stdin open, with nothing more to read
    ticks = child.stderr if command == "run" else child.stdout
    while b"tick" not in ticks.readline():
        pass
    child.send_signal(signal.SIGTERM)
    signalled = time.monotonic()
    try:
        child.wait(timeout=30)
    finally:
        child.kill()
    assert time.monotonic() - signalled < 2.0
    assert child.returncode == (0 if command == "run" else 128 + signal.SIGTERM), child.stderr.read()


KAFKA_TIMED = ["--source", "kafka://127.0.0.1:9/t", "--group", "g"]
KAFKA_TIMED += ["--window-time", "1h", "--tick-interval", "1m"]


@pytest.mark.parametrize(
    "args, message",
    [
        (["--source", "-", "--window-time", "1h", "--tick-interval", "1m"], "needs a Kafka source"),
        (
            ["--source", "kafka://127.0.0.1:9/t", "--group", "g", "--window-size", "10", "--tick-every", "5"],
            "needs --window-time and --tick-interval",
        ),
        ([*KAFKA_TIMED, "--min-count", "3"], "needs --min-support"),
        ([*KAFKA_TIMED, "--checkpoint-dir", "ck"], "--checkpoint-dir does not go with --coordination-topic"),
        ([*KAFKA_TIMED, "--tick-wait", "0s"], "must be positive"),
    ],
)
def test_coordination_options_are_checked_before_anything_is_read(capsys, args, message):
    code, err = run(capsys, *args, "--coordination-topic", "coord")
    assert code == 2 and message in err and err.count("\n") == 1


def test_tick_wait_needs_a_coordination_topic(capsys):
    code, err = run(capsys, *KAFKA_TIMED, "--tick-wait", "5s")
    assert code == 2 and "--tick-wait needs --coordination-topic" in err and err.count("\n") == 1
