"""The ``mine`` command: a file (or stdin, or the bundled example) through the window, with
the results printed on stdout. It runs the same loop as ``run``."""

from __future__ import annotations

import argparse
import json
import sys
from collections import Counter
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from stream_miner.cli.options import (
    DeprecatedAlias,
    UsageError,
    add_bad_records_option,
    add_input_options,
    add_mining_options,
    add_window_options,
    file_layout,
    positive_int,
    refresh_mode,
    run_settings,
)
from stream_miner.cli.paths import check_output_file
from stream_miner.cli.reporting import ResultPrinter, TickTimings
from stream_miner.cli.signals import stop_on_signals
from stream_miner.connectors.dead_letters import DeadLetterCounter, DeadLetterFile
from stream_miner.connectors.file_source import FileSource
from stream_miner.decoding.files import InputError, detect_format
from stream_miner.decoding.records import REFUSED_BASKETS, DeadLetter
from stream_miner.engine.refresh import Refresh
from stream_miner.runtime.protocols import TickListener

DEMO_FILE = "larkspur_market.jsonl"


def add_mine_parser(commands: argparse._SubParsersAction) -> None:
    """Register ``mine`` and its options."""
    mine = commands.add_parser(
        "mine",
        allow_abbrev=False,
        help="mine a file of baskets (or stdin) through the window",
        description="Mine frequent itemsets and rules from a file of baskets. Without INPUT, "
        "mines a bundled example (an invented neighbourhood grocery).",
    )
    mine.set_defaults(handler=run_mine)
    mine.add_argument("input", nargs="?", metavar="INPUT", help="file to mine, or - for stdin")
    records = mine.add_argument_group("input")
    add_input_options(records, format_help="from the file name")
    add_bad_records_option(records)
    records.add_argument(
        "--on-bad-input",
        choices=("fail", "skip"),
        action=DeprecatedAlias,
        new="--bad-records",
        dest="bad_records",
        values_map={"fail": "stop"},
    )
    records.add_argument(
        "--dead-letter-out",
        type=Path,
        metavar="PATH",
        help="append records set aside to this JSON Lines file",
    )
    window = add_window_options(mine, wall_clock=False)
    window.add_argument(
        "--window", type=positive_int, action=DeprecatedAlias, new="--window-size", dest="window_size"
    )
    window.add_argument(
        "--every", type=positive_int, action=DeprecatedAlias, new="--tick-every", dest="tick_every"
    )
    window.add_argument(
        "--tick-timings",
        action="store_true",
        help="with --tick-every: print the time spent per tick (window update and result refresh, "
        "without reading and printing) to stderr as JSON at the end",
    )
    add_mining_options(mine)
    out = mine.add_argument_group("output")
    out.add_argument("--json", action="store_true", help="JSON Lines instead of a table")


def run_mine(args: argparse.Namespace) -> int:
    """The ``mine`` command."""
    from stream_miner.runtime.runner import Runner  # numpy and the engine: only to mine

    for flag, given in (
        ("--full-remine", args.full_remine),
        ("--always-track", args.always_track),
        ("--tick-timings", args.tick_timings),
    ):
        if given and args.tick_every is None:
            raise UsageError(f"{flag} needs --tick-every")
    if args.dead_letter_out is not None:
        check_output_file(args.dead_letter_out, "--dead-letter-out")
    # without --tick-every there is one result: a full mine, no tracking
    refresh = Refresh.FULL if args.tick_every is None else refresh_mode(args)
    settings = run_settings(args, refresh=refresh)
    timings = TickTimings()
    listeners: list[TickListener] = [
        ResultPrinter(
            sys.stdout, as_json=args.json, show_rules=args.rules, numbered=args.tick_every is not None
        )
    ]
    if args.tick_timings:
        listeners.append(timings)
    with _input_path(args.input) as (path, label):
        fmt = args.format or detect_format(label)
        source = FileSource(path, file_layout(args, fmt))
        letters = DeadLetterFile(args.dead_letter_out) if args.dead_letter_out else DeadLetterCounter()
        sink = letters if args.bad_records == "skip" else StopAtMalformed(letters, label)
        runner = Runner(settings, source, sink, listeners, talk_when_clean=False, tick_on_stop=False)
        try:
            with stop_on_signals(runner.stop) as received:
                code = runner.run()
        finally:
            source.close()
            letters.close()
    if args.tick_timings:
        print("stream-miner: tick timings " + json.dumps(timings.summary(refresh)), file=sys.stderr)
    if received:
        print("stream-miner: interrupted", file=sys.stderr)
        return 128 + received[0]
    return code


class StopAtMalformed:
    """A dead-letter sink for ``--bad-records stop``: the first malformed record ends the
    command with a one-line error; refused baskets (too large, empty) are counted as usual."""

    def __init__(self, inner: DeadLetterCounter, label: str) -> None:
        self.inner = inner
        self.label = label
        self.counts: Counter[str] = inner.counts

    def write(self, letter: DeadLetter) -> None:
        if letter.reason not in REFUSED_BASKETS:
            raise InputError(
                f"{self.label}: {letter.message()} (use --bad-records skip to set such records aside)"
            )
        self.inner.write(letter)

    def flush(self) -> None:
        self.inner.flush()

    def position(self) -> int | None:
        return self.inner.position()

    def identity(self) -> str | None:
        return self.inner.identity()

    def truncate(self, position: int | None, identity: str | None = None) -> None:
        self.inner.truncate(position, identity)

    def close(self) -> None:
        self.inner.close()


@contextmanager
def _input_path(given: str | None) -> Iterator[tuple[str, str]]:
    """(path to open, label for messages and format detection); ``-`` is stdin, None the
    bundled example."""
    if given == "-":
        yield "-", "stdin"
    elif given is None:
        from importlib import resources  # only for the bundled example: keeps start-up quick

        with resources.as_file(resources.files("stream_miner.data").joinpath(DEMO_FILE)) as path:
            yield str(path), DEMO_FILE
    else:
        yield given, given
