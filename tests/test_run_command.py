"""`stream-miner run` over files: snapshots, checkpoints across crashes, bad input, duplicates,
event-time lateness and the TOML config. Processes are real (subprocess) where signals matter;
they are waited on by their readiness line and snapshots, never by fixed sleeps."""

from __future__ import annotations

import json
import signal
import subprocess
import sys

import pytest

from brute_force import frequent_itemsets
from processes import stream_miner, wait_until
from stream_miner.cli.main import main


def write_checkouts(path, n, seed=1, extra=()):
    import random

    rnd = random.Random(seed)
    goods = [f"g{i}" for i in range(12)]
    lines = []
    for i in range(n):
        items = sorted(set(rnd.sample(goods[:5], rnd.randint(1, 3)) + rnd.sample(goods, rnd.randint(0, 2))))
        lines.append(json.dumps({"id": f"c{i}", "ts": 1_700_000_000 + i, "items": items}))
    lines += list(extra)
    path.write_text("\n".join(lines) + "\n")
    return [json.loads(line)["items"] for line in lines[:n]]


def read_snapshot(path):
    lines = [json.loads(line) for line in path.read_text().splitlines()]
    return lines[0], {tuple(r["items"]): r["count"] for r in lines[1:] if r["type"] == "itemset"}


def consumed(path):
    """Baskets consumed as of the last snapshot at ``path`` (0 before the first)."""
    return read_snapshot(path)[0]["consumed"] if path.exists() else 0


def run_cli(*args):
    return subprocess.run([sys.executable, "-m", "stream_miner", *args], capture_output=True, text=True)


def test_snapshot_holds_the_last_window_exactly(tmp_path, capsys):
    data, snapshot = tmp_path / "in.jsonl", tmp_path / "snap.jsonl"
    baskets = write_checkouts(data, 1000)
    assert (
        main(
            [
                "run",
                "--source",
                f"file:{data}",
                "--window-size",
                "300",
                "--tick-every",
                "100",
                "--min-count",
                "20",
                "--snapshot-out",
                str(snapshot),
            ]
        )
        == 0
    )
    header, itemsets = read_snapshot(snapshot)
    assert header == {"type": "window", "size": 300, "consumed": 1000, "last_id": "c999", "tick": 9}
    assert itemsets == {tuple(sorted(k)): v for k, v in frequent_itemsets(baskets[-300:], 20).items()}
    assert "1000 baskets in the stream" in capsys.readouterr().err


def test_sigkill_mid_stream_then_restart_loses_and_double_counts_nothing(spawn, tmp_path):
    data = tmp_path / "in.jsonl"
    baskets = write_checkouts(data, 3000, seed=2)
    command = [
        "run",
        "--source",
        f"file:{data}",
        "--window-size",
        "800",
        "--tick-every",
        "50",
        "--min-count",
        "40",
        "--pace",
        "3000",
        "--checkpoint-dir",
        str(tmp_path / "ck"),
        "--checkpoint-interval",
        "0.05",
        "--snapshot-out",
        str(tmp_path / "snap.jsonl"),
    ]
    victim = spawn(stream_miner(*command))
    # kill once a checkpoint exists and the run has gone well past it (a few ticks at 3000/s)
    wait_until(
        lambda: (tmp_path / "ck" / "checkpoint.npz").exists() and consumed(tmp_path / "snap.jsonl") >= 600,
        20,
        "a checkpoint and 600 baskets consumed",
        victim,
        every=0.01,
    )
    victim.kill()
    assert victim.process.returncode == -signal.SIGKILL
    interrupted, _ = read_snapshot(tmp_path / "snap.jsonl")
    assert 0 < interrupted["consumed"] < 3000  # really killed mid-stream
    finished = run_cli(*command)
    assert finished.returncode == 0, finished.stderr
    assert "resumed from" in finished.stderr
    header, itemsets = read_snapshot(tmp_path / "snap.jsonl")
    assert header["consumed"] == 3000 and header["size"] == 800 and header["last_id"] == "c2999"
    assert itemsets == {tuple(sorted(k)): v for k, v in frequent_itemsets(baskets[-800:], 40).items()}


def test_sigterm_finishes_the_tick_checkpoints_and_exits_zero(spawn, tmp_path):
    data = tmp_path / "in.jsonl"
    write_checkouts(data, 2000, seed=3)
    command = stream_miner(
        "run",
        "--source",
        f"file:{data}",
        "--window-size",
        "500",
        "--tick-every",
        "100",
        "--min-count",
        "30",
        "--pace",
        "1000",
        "--checkpoint-dir",
        str(tmp_path / "ck"),
        "--snapshot-out",
        str(tmp_path / "snap.jsonl"),
    )
    process = spawn(command)
    process.wait_ready()  # the SIGTERM handler is set
    wait_until(lambda: consumed(tmp_path / "snap.jsonl") > 0, 20, "a first tick", process)
    process.stop(timeout=20)  # exit code 0
    assert (tmp_path / "ck" / "checkpoint.npz").exists()
    header, _ = read_snapshot(tmp_path / "snap.jsonl")
    assert 0 < header["consumed"] < 2000


def test_bad_records_go_to_the_dead_letter_file_and_the_stream_goes_on(tmp_path):
    data, letters = tmp_path / "in.jsonl", tmp_path / "dead.jsonl"
    bad = [
        '{"id": "x1", "items": "tea"}',
        "not json",
        '{"id": "x2", "items": []}',
        '{"items": ["a"], "ts": "soon"}',
        json.dumps({"id": "x3", "items": [f"bulk-{i}" for i in range(30)]}),
        '{"items": [{"qty": 2}]}',
        '{"id": 1.5, "items": ["a"]}',
    ]
    baskets = write_checkouts(data, 200, extra=bad)
    with data.open("ab") as out:
        out.write(b'{"items": ["caf\xe9"]}\n')
    assert (
        main(
            [
                "run",
                "--source",
                f"file:{data}",
                "--window-size",
                "1000",
                "--tick-every",
                "1000",
                "--min-count",
                "5",
                "--max-basket-items",
                "20",
                "--dead-letter-out",
                str(letters),
                "--snapshot-out",
                str(tmp_path / "snap.jsonl"),
            ]
        )
        == 0
    )
    reasons = [json.loads(line)["reason"] for line in letters.read_text().splitlines()]
    assert reasons == [
        "items not a list",
        "invalid JSON",
        "empty basket",
        "bad event time",
        "basket too large",
        "bad item",
        "bad id",
        "invalid UTF-8",
    ]
    header, itemsets = read_snapshot(tmp_path / "snap.jsonl")
    assert header["consumed"] == 200
    assert itemsets == {tuple(sorted(k)): v for k, v in frequent_itemsets(baskets, 5).items()}


def test_a_redelivered_basket_is_counted_once(tmp_path):
    data = tmp_path / "in.jsonl"
    first = [json.dumps({"id": f"o{i}", "items": ["tea", "jam"] if i % 2 else ["tea"]}) for i in range(10)]
    data.write_text("\n".join(first + first[3:6]) + "\n")
    assert (
        main(
            [
                "run",
                "--source",
                f"file:{data}",
                "--window-size",
                "100",
                "--tick-every",
                "100",
                "--min-count",
                "1",
                "--snapshot-out",
                str(tmp_path / "snap.jsonl"),
            ]
        )
        == 0
    )
    header, itemsets = read_snapshot(tmp_path / "snap.jsonl")
    assert header["consumed"] == 10
    assert itemsets == {("tea",): 10, ("jam",): 5, ("jam", "tea"): 5}


def test_event_time_window_with_allowed_lateness(tmp_path, capsys):
    data, letters = tmp_path / "in.jsonl", tmp_path / "dead.jsonl"
    rows = [
        ("a", 100, ["x"]),
        ("b", 110, ["x", "y"]),
        ("c", 105, ["y"]),  # c is late but in time
        ("d", 140, ["x"]),
        ("e", 95, ["y"]),  # e: older than 140 - 10 - 30
        ("f", 150, ["x", "y"]),
    ]
    data.write_text("\n".join(json.dumps({"id": i, "ts": t, "items": s}) for i, t, s in rows) + "\n")
    common = ["run", "--source", f"file:{data}", "--window-time", "30s", "--allowed-lateness", "10s"]
    common += ["--tick-every", "100", "--min-count", "1"]
    assert (
        main(
            [
                *common,
                "--dead-letter-out",
                str(letters),
                "--snapshot-out",
                str(tmp_path / "snap.jsonl"),
            ]
        )
        == 0
    )
    # While reading, the watermark is 150 - 10 = 140 and f waits; at the end of the input no
    # later basket can come, so the watermark moves to 150 and f enters: the window is
    # (120, 150], holding d and f (a, b and c expired, e was too late).
    header, itemsets = read_snapshot(tmp_path / "snap.jsonl")
    assert itemsets == {("x",): 2, ("y",): 1, ("x", "y"): 1}
    assert (header["start_time"], header["end_time"], header["consumed"]) == (120, 150, 5)
    assert [json.loads(line)["reason"] for line in letters.read_text().splitlines()] == ["too late"]
    assert (
        main(
            [
                *common,
                "--late",
                "drop",
            ]
        )
        == 0
    )
    assert "1 dropped as too late" in capsys.readouterr().err


def test_time_window_run_checkpoints_and_resumes_with_its_duplicate_memory(tmp_path):
    data = tmp_path / "in.jsonl"
    rows = [
        json.dumps({"id": f"t{i}", "ts": 1000 + i, "items": ["x", "y"] if i % 2 else ["x"]})
        for i in range(60)
    ]
    data.write_text("\n".join(rows[:40]) + "\n")
    command = [
        "run",
        "--source",
        f"file:{data}",
        "--window-time",
        "25s",
        "--tick-every",
        "10",
        "--min-count",
        "1",
        "--checkpoint-dir",
        str(tmp_path / "ck"),
        "--snapshot-out",
        str(tmp_path / "snap.jsonl"),
    ]
    assert main(command) == 0
    data.write_text("\n".join(rows[:40] + rows[35:60]) + "\n")  # t35..t39 delivered again
    assert main(command) == 0
    header, itemsets = read_snapshot(tmp_path / "snap.jsonl")
    window = [i for i in range(60) if i > 59 - 25]
    assert header["consumed"] == 60
    assert itemsets[("x",)] == len(window) and itemsets[("x", "y")] == sum(i % 2 for i in window)


def test_config_file_supplies_options_and_flags_override_it(tmp_path, capsys):
    data = tmp_path / "in.jsonl"
    baskets = write_checkouts(data, 400, seed=5)
    config = tmp_path / "run.toml"
    config.write_text(
        f'source = "file:{data}"\nwindow-size = 100\ntick_every = 50\nmin-count = 15\n'
        f'snapshot-out = "{tmp_path / "snap.jsonl"}"\n'
    )
    assert main(["run", "--config", str(config)]) == 0
    _, itemsets = read_snapshot(tmp_path / "snap.jsonl")
    assert itemsets == {tuple(sorted(k)): v for k, v in frequent_itemsets(baskets[-100:], 15).items()}
    assert main(["run", "--config", str(config), "--min-count", "30"]) == 0
    _, itemsets = read_snapshot(tmp_path / "snap.jsonl")
    assert itemsets == {tuple(sorted(k)): v for k, v in frequent_itemsets(baskets[-100:], 30).items()}
    config.write_text("windowsize = 3\n")
    assert main(["run", "--config", str(config)]) == 2
    assert "unknown option 'windowsize'" in capsys.readouterr().err


def test_corrupted_checkpoint_is_an_error_until_start_fresh(tmp_path, capsys):
    data = tmp_path / "in.jsonl"
    write_checkouts(data, 100)
    (tmp_path / "ck").mkdir()
    (tmp_path / "ck" / "checkpoint.npz").write_bytes(b"definitely not a checkpoint")
    command = [
        "run",
        "--source",
        f"file:{data}",
        "--window-size",
        "50",
        "--tick-every",
        "50",
        "--min-count",
        "5",
        "--checkpoint-dir",
        str(tmp_path / "ck"),
    ]
    assert main(command) == 2
    assert "--start-fresh" in capsys.readouterr().err
    assert main(command + ["--start-fresh"]) == 0
    assert main(command) == 0  # the fresh run replaced it with a good checkpoint


@pytest.mark.parametrize(
    "args, message",
    [
        (["--window-size", "5", "--tick-every", "5"], "--source"),
        (["--source", "file:x", "--tick-every", "5"], "--window-size"),
        (["--source", "file:x", "--window-size", "5"], "--tick-every"),
        (["--source", "kafka://h:1/t", "--window-size", "5", "--tick-every", "5"], "needs --group"),
        (["--source", "ftp://x", "--window-size", "5", "--tick-every", "5"], "unsupported --source"),
    ],
)
def test_missing_or_unsupported_options_exit_2(args, message, capsys):
    assert main(["run", *args]) == 2
    assert message in capsys.readouterr().err


def test_tick_interval_ticks_by_wall_clock_while_records_keep_coming(tmp_path):
    data = tmp_path / "in.jsonl"
    write_checkouts(data, 3000, seed=6)
    finished = run_cli(
        "run",
        "--source",
        f"file:{data}",
        "--window-size",
        "200",
        "--tick-interval",
        "0.2s",
        "--min-count",
        "10",
        "--pace",
        "1000",
        "--snapshot-out",
        str(tmp_path / "snap.jsonl"),
    )
    assert finished.returncode == 0, finished.stderr
    header, _ = read_snapshot(tmp_path / "snap.jsonl")
    assert header["consumed"] == 3000
    # about 3 s of input at one tick per 0.2 s; the first tick also loads the compiled loops
    assert 5 <= header["tick"] <= 20


def test_follow_keeps_reading_a_growing_file_until_sigterm(spawn, tmp_path):
    data, snapshot = tmp_path / "growing.jsonl", tmp_path / "snap.jsonl"
    data.write_text(json.dumps({"id": "a0", "items": ["tea"]}) + "\n")
    process = spawn(
        stream_miner(
            "run",
            "--source",
            f"file:{data}",
            "--follow",
            "--window-size",
            "100",
            "--tick-interval",
            "0.1s",
            "--min-count",
            "1",
            "--snapshot-out",
            str(snapshot),
        )
    )
    process.wait_ready()
    wait_until(lambda: consumed(snapshot) == 1, 20, "the first line read (the reader is at the end)", process)
    with data.open("a") as out:
        out.write(json.dumps({"id": "a1", "items": ["tea", "jam"]}) + "\n")
        out.write('{"id": "a2", "items": ["ja')  # a line still being written
        out.flush()
        wait_until(lambda: consumed(snapshot) == 2, 20, "the appended line read", process)
        # two more ticks, so the loop has polled again with the half-written line pending
        tick = read_snapshot(snapshot)[0]["tick"]
        wait_until(lambda: read_snapshot(snapshot)[0]["tick"] >= tick + 2, 20, "two more ticks", process)
        out.write('m"]}\n')
    wait_until(lambda: consumed(snapshot) == 3, 20, "the completed line read", process)
    process.stop(timeout=20)  # exit code 0
    header, itemsets = read_snapshot(snapshot)
    assert header["consumed"] == 3
    assert itemsets == {("tea",): 2, ("jam",): 2, ("jam", "tea"): 1}
