"""The ``stream-miner`` command line."""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import time
from collections import Counter
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from importlib import resources
from typing import IO, TextIO

from stream_miner.cli.options import (
    UsageError,
    add_hygiene_options,
    add_mining_options,
    basket_policy,
    mining_params,
    positive_int,
)
from stream_miner.cli.output import json_lines, write_table
from stream_miner.cli.progress import Progress
from stream_miner.cli.run import add_run_parser, apply_config
from stream_miner.decoding.files import FORMATS, InputError, detect_format, read_records
from stream_miner.decoding.records import BadRecord
from stream_miner.engine.hygiene import Verdict
from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.result import MiningResult
from stream_miner.engine.window import CountWindow

EXIT_BAD_INPUT = 2
DEMO_FILE = "larkspur_market.jsonl"


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``stream-miner`` console script; returns the exit code."""
    parser = _parser()
    arguments = list(sys.argv[1:] if argv is None else argv)
    try:
        if arguments[:1] == ["run"]:
            apply_config(_subparser(parser, "run"), arguments[1:])
        args = parser.parse_args(arguments)
        return args.handler(args)
    except (UsageError, InputError, ValueError) as error:
        print(f"stream-miner: error: {error}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except BrokenPipeError:
        sys.stderr.close()  # the reader went away (e.g. `| head`): not an error
        return 0
    except KeyboardInterrupt:
        return 130


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="stream-miner",
        description="Exact sliding-window association-rule mining of shopping baskets.",
    )
    commands = parser.add_subparsers(required=True, metavar="COMMAND")
    mine = commands.add_parser(
        "mine",
        help="mine a file of baskets (or stdin) through the window",
        description="Mine frequent itemsets and rules from a file of baskets. Without INPUT, "
        "mines a bundled example (an invented neighbourhood grocery).",
    )
    mine.set_defaults(handler=run_mine)
    mine.add_argument("input", nargs="?", metavar="INPUT", help="file to mine, or - for stdin")
    fmt = mine.add_argument_group("input")
    fmt.add_argument("--format", choices=FORMATS, help="input format (default: from the extension)")
    fmt.add_argument("--csv-id-column", default="transaction_id", help="CSV transaction-id column")
    fmt.add_argument("--csv-item-column", default="item", help="CSV item column")
    fmt.add_argument(
        "--on-bad-input",
        choices=("fail", "skip"),
        default="fail",
        help="stop at the first bad line (exit 2) or skip and count bad lines",
    )
    add_hygiene_options(fmt)
    win = mine.add_argument_group("window")
    win.add_argument(
        "--window", type=positive_int, metavar="N", help="mine the last N baskets (default: all)"
    )
    win.add_argument(
        "--every",
        type=positive_int,
        metavar="K",
        help="once the window is full, emit the result again after every K further baskets",
    )
    win.add_argument(
        "--full-remine",
        action="store_true",
        help="with --every: mine the whole window at every tick instead of updating "
        "the previous result (same output; for comparison)",
    )
    win.add_argument(
        "--tick-timings",
        action="store_true",
        help="with --every: print the time spent per tick (window update and result "
        "refresh, without reading and printing) to stderr as JSON at the end",
    )
    add_mining_options(mine)
    out = mine.add_argument_group("output")
    out.add_argument("--json", action="store_true", help="JSON Lines instead of a table")
    add_run_parser(commands)
    return parser


def _subparser(parser: argparse.ArgumentParser, name: str) -> argparse.ArgumentParser:
    action = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return action.choices[name]


def run_mine(args: argparse.Namespace) -> int:
    """The ``mine`` command."""
    for flag, given in (("--full-remine", args.full_remine), ("--tick-timings", args.tick_timings)):
        if given and args.every is None:
            raise UsageError(f"{flag} needs --every")
    params = mining_params(args)
    miner = WindowMiner(
        CountWindow(args.window) if args.window else None,
        basket_policy(args),
    )
    bad: Counter[str] = Counter()
    out = sys.stdout
    with _open_input(args.input) as (stream, label):
        fmt = args.format or detect_format(label)
        progress = Progress(stream, label)
        records = read_records(
            stream, fmt, csv_id_column=args.csv_id_column, csv_item_column=args.csv_item_column
        )
        ticks = _Ticker(args.window, args.every)
        timings = TickTimings()
        try:
            for number, record in enumerate(records, start=1):
                progress.update(number)
                if isinstance(record, BadRecord):
                    if args.on_bad_input == "fail":
                        raise InputError(
                            f"{label}: {record.message()} (use --on-bad-input skip to skip such lines)"
                        )
                    bad[record.reason] += 1
                    continue
                verdict = miner.add(record.items, record.ts)
                if verdict in (Verdict.ACCEPTED, Verdict.TRUNCATED) and ticks.accept():
                    _emit(miner, params, args, out, ticks.emitted(), timings)
            if ticks.owes_final():
                _emit(miner, params, args, out, ticks.emitted(), timings)
        finally:
            progress.close()
    _summarise(bad, miner.verdicts, sys.stderr)
    if args.tick_timings:
        print("stream-miner: tick timings " + json.dumps(timings.summary(args.full_remine)), file=sys.stderr)
    return 0


class _Ticker:
    """Decides when ``mine --every`` emits: at window full, then every K baskets, then at the end."""

    def __init__(self, window: int | None, every: int | None) -> None:
        self.first = window if window is not None else every
        self.every = every
        self.accepted = 0
        self.last_emit: int | None = None
        self.count = 0

    def accept(self) -> bool:
        """Count one accepted basket; True when a result is due now."""
        self.accepted += 1
        if self.every is None or self.first is None or self.accepted < self.first:
            return False
        return (self.accepted - self.first) % self.every == 0

    def owes_final(self) -> bool:
        """True when baskets arrived since the last emission (or nothing was emitted)."""
        return self.last_emit != self.accepted or self.last_emit is None

    def emitted(self) -> int | None:
        """Record an emission; return its tick number (None without --every)."""
        self.last_emit = self.accepted
        if self.every is None:
            return None
        self.count += 1
        return self.count - 1


class TickTimings:
    """Seconds spent per tick of ``mine --every``: applying the buffered baskets to the window
    (the same work in both modes) and refreshing the result (incremental or full re-mine)."""

    def __init__(self) -> None:
        self.window: list[float] = []
        self.refresh: list[float] = []

    def timed_tick(self, miner: WindowMiner, params: MiningParams, full_remine: bool) -> MiningResult:
        started = time.perf_counter()
        miner.flush()
        applied = time.perf_counter()
        result = miner.tick(params, full_remine=full_remine).result
        self.window.append(applied - started)
        self.refresh.append(time.perf_counter() - applied)
        return result

    def summary(self, full_remine: bool) -> dict:
        """Tick count and median, mean and 90th percentile in milliseconds; the first tick
        (which starts the tracking) is left out of the refresh figures and shown apart."""
        steady = self.refresh[1:] or self.refresh
        return {
            "mode": "full-remine" if full_remine else "incremental",
            "ticks": len(self.refresh),
            "first_refresh_ms": round(1e3 * self.refresh[0], 3) if self.refresh else None,
            "refresh_ms": _spread(steady),
            "window_update_ms": _spread(self.window),
        }


def _spread(seconds: list[float]) -> dict[str, float] | None:
    if not seconds:
        return None
    ordered = sorted(seconds)
    return {
        "median": round(1e3 * statistics.median(ordered), 3),
        "mean": round(1e3 * statistics.fmean(ordered), 3),
        "p90": round(1e3 * ordered[int(0.9 * (len(ordered) - 1))], 3),
    }


def _emit(
    miner: WindowMiner,
    params: MiningParams,
    args: argparse.Namespace,
    out: TextIO,
    tick: int | None,
    timings: TickTimings,
) -> None:
    if tick is None:
        result: MiningResult = miner.mine(params)
    else:
        result = timings.timed_tick(miner, params, args.full_remine)
    if args.json:
        lines = json_lines(result, tick)
        if lines:
            out.write("\n".join(lines) + "\n")
    else:
        write_table(result, out, show_rules=args.rules, tick=tick)
    out.flush()


@contextmanager
def _open_input(path: str | None) -> Iterator[tuple[IO[bytes], str]]:
    if path == "-":
        yield sys.stdin.buffer, "stdin"
    elif path is None:
        with resources.files("stream_miner.data").joinpath(DEMO_FILE).open("rb") as stream:
            yield stream, DEMO_FILE
    else:
        try:
            stream = open(path, "rb")  # noqa: SIM115 (closed by the with below)
        except OSError as error:
            raise InputError(f"cannot read {path!r}: {error.strerror}") from None
        with stream:
            yield stream, path


def _summarise(bad: Counter[str], verdicts: Counter[Verdict], err: TextIO) -> None:
    parts = []
    if bad:
        reasons = ", ".join(f"{reason} {n}" for reason, n in sorted(bad.items()))
        parts.append(f"skipped {sum(bad.values())} bad records ({reasons})")
    labels = {
        Verdict.SKIPPED_OVERSIZE: "oversized baskets skipped",
        Verdict.TRUNCATED: "oversized baskets truncated",
        Verdict.SKIPPED_EMPTY: "empty baskets skipped",
    }
    parts += [f"{verdicts[v]} {label}" for v, label in labels.items() if verdicts[v]]
    if parts:
        print("stream-miner: " + "; ".join(parts), file=err)


if __name__ == "__main__":
    sys.exit(main())
