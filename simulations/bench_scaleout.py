"""Scale-out: ``stream-miner run --coordination-topic`` with 1, 2, 3 ... members, side by side.

    python -m simulations.bench_scaleout [--baskets 500000] [--members 1,2,3] [--partitions 6]
        [--window 100000] [--tick 20000] [--min-support 0.01] [--first-at TICK/2]
        [--timeout 300] [--seed 7]

One run (about 2.5 minutes on 2 cores): start the test broker, load ``--baskets`` Quest T10
baskets as JSON messages with event times (basket i at a tick boundary + ``--first-at`` + i
seconds, so ``--window`` and ``--tick`` count baskets' worth of event time) into a topic of
``--partitions`` partitions, round robin, before any member starts. By default the first
baskets of every partition lie between the same two boundaries (``--first-at 0`` puts the
first basket on a boundary, so the members' first ticks can differ).

Then, for each member count k in turn (a fresh coordination topic and group each time), a
reader of the coordination topic starts, then k members (``--window-time`` and
``--tick-interval`` as above), until the close of the last tick covering the data (the last
boundary below the newest event time) is read; the members are stopped with SIGTERM. Per k:

- throughput: baskets / wall seconds from the members' start to that close (process start,
  the group join and the catch-up on the loaded topic included); ``steady_per_s`` counts
  only the event time between the first and the last close;
- tick latency: per closed tick, the time from its first part to its close (the Kafka record
  timestamps on the coordination topic), median and p90;
- coordination cost: messages (reassembled) and bytes (record values) per closed tick, by kind;
- incomplete ticks (closes with ``complete`` false, and what they missed): should be none;
- exactness: every complete tick's global result counts exactly the baskets with an event
  time in (T - window, T] (a check of the count n only: cheap).

The members run the source tree this module belongs to. Prints one JSON object to stdout
(per-k figures, ratios vs the first k), a short table and progress to stderr; exits 1 when a
tick was incomplete or a count was wrong.
"""

from __future__ import annotations

import argparse
import io
import json
import math
import os
import signal
import statistics
import subprocess
import sys
import tempfile
import time
from collections import Counter
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import IO

from kafka import KafkaConsumer, TopicPartition
from kafka.consumer.fetcher import ConsumerRecord

from simulations.bench_engine import environment, load_baskets, log
from simulations.text_table import text_table
from stream_miner.cluster.wire import CLOSE, KINDS, PART, Reassembly

TREE = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(TREE / "tests"))
from kafka_broker import GROUP_OPTIONS, Broker, start_broker, stop_broker  # noqa: E402

START = 1_700_000_000  # a tick boundary (seconds) for the usual intervals; the first basket follows it
SOURCE = "baskets"
STOP_TIMEOUT = 60.0  # seconds a member gets to exit after SIGTERM


@dataclass
class Observed:
    """What the coordination topic said during one run, as the bench's reader saw it."""

    first_part_ms: dict[float, int] = field(default_factory=dict)  # tick -> its first part's timestamp
    closes: dict[float, tuple[int, dict]] = field(default_factory=dict)  # tick -> (timestamp, body)
    messages: Counter[str] = field(default_factory=Counter)  # kind -> messages
    bytes: Counter[str] = field(default_factory=Counter)  # kind -> record value bytes
    _pending: dict[bytes, int] = field(default_factory=dict)  # message name -> its bytes so far

    def take(self, reassembly: Reassembly, record: ConsumerRecord) -> None:
        """Feed one coordination record."""
        name = dict(record.headers or []).get("message", b"")
        self._pending[name] = self._pending.get(name, 0) + len(record.value or b"")
        message = reassembly.take(record.value, record.headers)
        if message is None:
            return
        self.messages[message.kind] += 1
        self.bytes[message.kind] += self._pending.pop(name, 0)
        if message.kind == PART:
            self.first_part_ms.setdefault(message.tick, record.timestamp)
        elif message.kind == CLOSE and message.tick not in self.closes:
            self.closes[message.tick] = (record.timestamp, message.body)


def event_time(i: int, args: argparse.Namespace) -> int:
    """The event time of basket ``i``: one a second from ``--first-at`` past START."""
    return START + args.first_at + i


def expected_n(tick: float, args: argparse.Namespace) -> int:
    """How many baskets have an event time in (tick - window, tick]."""
    high = min(math.floor(tick - event_time(0, args)), args.baskets - 1)
    low = max(math.floor(tick - args.window - event_time(0, args)) + 1, 0)
    return max(0, high - low + 1)


def last_tick(args: argparse.Namespace) -> float:
    """The last tick boundary below the newest event time (its close ends a run)."""
    return (math.ceil(event_time(args.baskets - 1, args) / args.tick) - 1) * args.tick


def member_command(address: str, coordination: str, group: str, args: argparse.Namespace) -> list[str]:
    command = [sys.executable, "-m", "stream_miner", "run", "--source", f"kafka://{address}/{SOURCE}"]
    command += ["--group", group, "--coordination-topic", coordination, "--quiet"]
    command += ["--window-time", f"{args.window}s", "--tick-interval", f"{args.tick}s"]
    command += ["--min-support", str(args.min_support)]
    for option in GROUP_OPTIONS:
        command += ["--kafka-option", option]
    return command


def run_members(broker: Broker, k: int, args: argparse.Namespace, workdir: Path) -> dict[str, object]:
    """Start ``k`` members on a fresh coordination topic and group; the figures of the run."""
    coordination, group = f"coordination-k{k}", f"bench-k{k}"
    broker.create_topic(coordination, 1)
    reader = KafkaConsumer(bootstrap_servers=broker.address, enable_auto_commit=False)
    partition = TopicPartition(coordination, 0)
    reader.assign([partition])
    reader.seek_to_beginning(partition)
    reassembly, seen, final = Reassembly(io.StringIO()), Observed(), last_tick(args)
    paths = [str(TREE), *filter(None, [os.environ.get("PYTHONPATH")])]
    env = os.environ | {"PYTHONPATH": os.pathsep.join(paths)}
    logs: list[IO[str]] = []
    members: list[subprocess.Popen] = []
    try:
        started_ms = time.time() * 1000
        for m in range(k):
            logs.append(open(workdir / f"k{k}-member{m}.log", "w+", encoding="utf-8"))  # noqa: SIM115
            command = member_command(broker.address, coordination, group, args)
            members.append(subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=logs[-1], env=env))
        deadline = time.monotonic() + args.timeout
        while final not in seen.closes:
            for records in reader.poll(timeout_ms=100).values():
                for record in records:
                    seen.take(reassembly, record)
            for m, process in enumerate(members):
                if process.poll() is not None:
                    raise RuntimeError(f"member {m} of {k} stopped: {_tail(logs[m])}")
            if time.monotonic() > deadline:
                raise RuntimeError(f"{k} member(s): the last tick not closed in {args.timeout:g} s")
        for process in members:
            process.send_signal(signal.SIGTERM)
        codes = [process.wait(timeout=STOP_TIMEOUT) for process in members]
    finally:
        for process in members:
            if process.poll() is None:
                process.kill()
                process.wait()
        reader.close()
        for handle in logs:
            handle.close()
    return figures(seen, started_ms, final, args) | {"member_exit_codes": codes}


def _tail(handle: IO[str], lines: int = 5) -> str:
    """The last lines a member wrote to stderr, on one line."""
    handle.flush()
    handle.seek(0)
    return " | ".join(handle.read().splitlines()[-lines:])


def figures(seen: Observed, started_ms: float, final: float, args: argparse.Namespace) -> dict[str, object]:
    """The figures of one member count from what the reader saw."""
    closes = dict(sorted(seen.closes.items()))
    complete = {t: body for t, (_, body) in closes.items() if body.get("complete")}
    counted = {t: int(body["state"]["result"]["n"]) for t, body in complete.items()}
    wrong = {_label(t): [n, expected_n(t, args)] for t, n in counted.items() if n != expected_n(t, args)}
    latencies = [
        (ms - seen.first_part_ms[t]) / 1000 for t, (ms, _) in closes.items() if t in seen.first_part_ms
    ]
    ticks, first, last_ms = len(closes), min(closes), closes[final][0]
    wall = (last_ms - started_ms) / 1000
    steady = (final - first) / ((last_ms - closes[first][0]) / 1000) if final > first else None
    return {
        "wall_s": round(wall, 2),
        "first_part_s": round((min(seen.first_part_ms.values()) - started_ms) / 1000, 2),
        "baskets_per_s": round(args.baskets / wall),
        "steady_per_s": None if steady is None else round(steady),
        "ticks_closed": ticks,
        "ticks_incomplete": ticks - len(complete),
        "incomplete": {
            _label(t): body.get("missing") for t, (_, body) in closes.items() if t not in complete
        },
        "tick_latency_s": {
            "median": round(statistics.median(latencies), 3),
            "p90": round(_quantile(latencies, 0.9), 3),
        },
        "per_tick": {
            "messages": {
                kind: round(seen.messages[kind] / ticks, 2) for kind in KINDS if seen.messages[kind]
            },
            "bytes": {kind: round(seen.bytes[kind] / ticks) for kind in KINDS if seen.bytes[kind]},
            "messages_all": round(sum(seen.messages.values()) / ticks, 2),
            "bytes_all": round(sum(seen.bytes.values()) / ticks),
        },
        "exact": {
            "ticks_checked": len(complete),
            "last_tick": _label(final),
            "last_tick_n": counted.get(final),
            "last_tick_expected_n": expected_n(final, args),
            "wrong": wrong,
            "passed": final in counted and not wrong,
        },
    }


def _label(tick: float) -> str:
    """A tick as seconds after START (the boundary the data starts after)."""
    return f"{tick - START:g}"


def _quantile(values: list[float], q: float) -> float:
    """The ``q`` quantile, interpolated linearly between the ranks."""
    ordered = sorted(values)
    position = q * (len(ordered) - 1)
    low = math.floor(position)
    high = min(low + 1, len(ordered) - 1)
    return ordered[low] + (ordered[high] - ordered[low]) * (position - low)


def measure(args: argparse.Namespace) -> dict[str, dict]:
    """Start the broker, load the baskets, run every member count in turn; figures per k."""
    baskets = load_baskets("quest", args.baskets, seed=args.seed)
    broker = start_broker()
    runs: dict[str, dict] = {}
    try:
        broker.create_topic(SOURCE, args.partitions)
        log(f"producing {args.baskets} baskets into {args.partitions} partitions")
        broker.produce(
            SOURCE,
            (
                {"id": f"b{i}", "ts": event_time(i, args), "items": [str(x) for x in basket]}
                for i, basket in enumerate(baskets)
            ),
            partition_of=lambda i: i % args.partitions,
        )
        with tempfile.TemporaryDirectory(prefix="bench-scaleout-") as workdir:
            for k in args.members:
                log(f"{k} member(s)")
                runs[str(k)] = run_members(broker, k, args, Path(workdir))
    finally:
        stop_broker(broker)
    return runs


def report(args: argparse.Namespace, runs: dict[str, dict]) -> dict[str, object]:
    """The JSON report: the settings, the figures per member count and their ratios."""
    base = runs[str(args.members[0])]

    def ratio(run: dict, *keys: str) -> float:
        value, reference = run, base
        for key in keys:
            value, reference = value[key], reference[key]
        return round(float(value) / float(reference), 2)

    return {
        "environment": environment(),
        "baskets": args.baskets,
        "partitions": args.partitions,
        "window_baskets": args.window,
        "tick_baskets": args.tick,
        "first_at": args.first_at,
        "min_support": args.min_support,
        "members": runs,
        f"ratios_vs_k{args.members[0]}": {
            k: {
                "baskets_per_s": ratio(run, "baskets_per_s"),
                "tick_latency_median": ratio(run, "tick_latency_s", "median"),
                "bytes_per_tick": ratio(run, "per_tick", "bytes_all"),
            }
            for k, run in runs.items()
        },
        "note": "event time: one basket a second; wall time from the members' start (process start, group "
        "join and catch-up included); tick latency from a tick's first part to its close; exactness: each "
        "complete tick's n equals the baskets with ts in (T - window, T]",
    }


def table(runs: dict[str, dict]) -> list[str]:
    """A short human summary of the figures."""
    cells = [["members", "baskets/s", "steady/s", "latency p50", "p90", "msgs/tick", "bytes/tick"]]
    cells[0] += ["incomplete", "exact"]
    for k, run in runs.items():
        latency = run["tick_latency_s"]
        cells.append(
            [k, str(run["baskets_per_s"]), str(run["steady_per_s"])]
            + [f"{latency['median']:.2f}s", f"{latency['p90']:.2f}s"]
            + [f"{run['per_tick']['messages_all']:g}", str(run["per_tick"]["bytes_all"])]
            + [str(run["ticks_incomplete"]), "yes" if run["exact"]["passed"] else "NO"]
        )
    return text_table(cells, first_left=True, rule=True)


def parse_args(argv: Sequence[str] | None) -> argparse.Namespace:
    parser = argparse.ArgumentParser(prog="python -m simulations.bench_scaleout", description=__doc__)
    parser.add_argument("--baskets", type=int, default=500_000)
    parser.add_argument("--members", default="1,2,3", help="member counts to run, in turn (comma-separated)")
    parser.add_argument("--partitions", type=int, default=6, help="partitions of the source topic")
    parser.add_argument("--window", type=int, default=100_000, help="window, in baskets' worth of event time")
    parser.add_argument(
        "--tick", type=int, default=20_000, help="tick interval, in baskets' worth of event time"
    )
    parser.add_argument("--min-support", type=float, default=0.01)
    parser.add_argument(
        "--first-at", type=int, help="the first basket's event time, in seconds after a tick boundary"
    )
    parser.add_argument("--timeout", type=float, default=300.0, help="seconds one member count may take")
    parser.add_argument("--seed", type=int, default=7)
    args = parser.parse_args(argv)
    try:
        args.members = [int(k) for k in args.members.split(",")]
    except ValueError:
        parser.error(f"--members {args.members!r}: give member counts like 1,2,3")
    if min(args.members) < 1 or len(set(args.members)) < len(args.members) or args.partitions < 1:
        parser.error("member counts must be distinct and >= 1, --partitions >= 1")
    if not 0 < args.tick <= args.window or args.tick >= args.baskets:
        parser.error("need 0 < --tick <= --window and --tick < --baskets")
    if not 0 < args.min_support <= 1:
        parser.error("--min-support must lie in (0, 1]")
    args.first_at = args.tick // 2 if args.first_at is None else args.first_at
    if not 0 <= args.first_at < args.tick:
        parser.error("need 0 <= --first-at < --tick")
    return args


def main(argv: Sequence[str] | None = None) -> int:
    """Run the bench; print the JSON report and the table; 1 when a check failed."""
    args = parse_args(argv)
    try:
        runs = measure(args)
    except (RuntimeError, subprocess.TimeoutExpired) as error:
        print(f"bench_scaleout: error: {error}", file=sys.stderr)
        return 1
    json.dump(report(args, runs), sys.stdout, indent=1)
    print()
    print("\n".join(table(runs)), file=sys.stderr)
    failed = [k for k, run in runs.items() if run["ticks_incomplete"] or not run["exact"]["passed"]]
    if failed:
        print(f"bench_scaleout: checks failed with {', '.join(failed)} member(s)", file=sys.stderr)
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
