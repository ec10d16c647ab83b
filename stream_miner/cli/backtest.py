"""The ``backtest`` command: replay a history file through the same loop as ``run``, with
``run``'s window, tick, mining and drift options, and report which drift events would have
fired (a self-contained HTML page and/or JSON)."""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from stream_miner.cli.drift_options import add_drift_options, detector_settings
from stream_miner.cli.options import (
    UsageError,
    add_bad_records_option,
    add_input_options,
    add_mining_options,
    add_window_options,
    file_layout,
    positive_int,
    run_settings,
)
from stream_miner.cli.paths import check_output_file
from stream_miner.cli.signals import stop_on_signals
from stream_miner.connectors.dead_letters import DeadLetterCounter
from stream_miner.connectors.file_source import FileSource
from stream_miner.decoding.files import InputError, detect_format
from stream_miner.drift.settings import DriftSettings

DEFAULT_CHART_PATTERNS, MAX_CHART_PATTERNS = 8, 20


def add_backtest_parser(commands: argparse._SubParsersAction) -> None:
    """Register ``backtest`` and its options."""
    backtest = commands.add_parser(
        "backtest",
        allow_abbrev=False,
        help="replay a history file with run's settings and report the drift events that would have fired",
        description="Replay a file of past baskets through the same window, ticks, mining and drift "
        "detector as `run` (same options; ticks count baskets, a replay has no wall clock) and write "
        "what happened: the settings, a timeline of the strongest patterns' support and lift with "
        "the events marked, the events, the detector's summary and throughput. --report writes a "
        "self-contained HTML page, --json the same data as JSON.",
    )
    backtest.set_defaults(handler=run_backtest)
    backtest.add_argument(
        "input", metavar="INPUT", help="history file (any format `mine` reads), or - for stdin"
    )
    records = backtest.add_argument_group("records")
    add_input_options(records, format_help="from the file name; jsonl for stdin")
    add_bad_records_option(records)
    add_window_options(backtest, wall_clock=False)
    add_mining_options(backtest)
    add_drift_options(backtest, outputs=False)
    out = backtest.add_argument_group("report")
    out.add_argument("--report", type=Path, metavar="PATH", help="write the HTML report here")
    out.add_argument("--json", metavar="PATH", help="write the report's data as JSON here (- for stdout)")
    out.add_argument(
        "--chart-patterns",
        type=positive_int,
        default=DEFAULT_CHART_PATTERNS,
        metavar="K",
        help=f"chart K patterns: those with events first, then those tracked longest "
        f"(default {DEFAULT_CHART_PATTERNS}, at most {MAX_CHART_PATTERNS})",
    )


def run_backtest(args: argparse.Namespace) -> int:
    """The ``backtest`` command."""
    from stream_miner.cli.mine import StopAtMalformed
    from stream_miner.report.data import backtest_data
    from stream_miner.report.recorder import BacktestRecorder
    from stream_miner.runtime.runner import Runner  # numpy and the engine: only to mine

    settings = run_settings(args, drift=_checked(args))
    label = "stdin" if args.input == "-" else args.input
    fmt = args.format or ("jsonl" if args.input == "-" else detect_format(label))
    source = FileSource(args.input, file_layout(args, fmt))
    recorder = BacktestRecorder()
    letters = DeadLetterCounter()
    sink = letters if args.bad_records == "skip" else StopAtMalformed(letters, label)
    runner = Runner(settings, source, sink, [recorder], silent_ticks=True)
    started = time.perf_counter()
    try:
        with stop_on_signals(runner.stop) as received:
            code = runner.run()
    finally:
        source.close()
    wall = time.perf_counter() - started
    if code:
        return code
    figures = runner.figures()
    if figures.consumed == 0:
        raise InputError(f"{label}: no baskets to replay")
    data = backtest_data(
        source=source.name,
        fmt=fmt,
        settings=settings,
        recorder=recorder,
        figures=figures,
        wall_seconds=wall,
        complete=not received,
        chart_patterns=args.chart_patterns,
    )
    _write(args, data)
    return 0


def _checked(args: argparse.Namespace) -> DriftSettings:
    """The detector's settings, once the options fit together and the outputs can be written
    (before anything is read)."""
    if args.window_size is None and args.window_time is None:
        raise UsageError("give --window-size N or --window-time DURATION")
    if args.tick_every is None:
        raise UsageError("give --tick-every N")
    if args.report is None and args.json is None:
        raise UsageError("give --report PATH (HTML) or --json PATH, or both")
    if args.chart_patterns > MAX_CHART_PATTERNS:
        raise UsageError(f"--chart-patterns {args.chart_patterns}: at most {MAX_CHART_PATTERNS}")
    if args.report is not None:
        check_output_file(args.report, "--report")
    if args.json not in (None, "-"):
        check_output_file(Path(args.json), "--json")
        if args.report is not None and Path(args.json).resolve() == args.report.resolve():
            raise UsageError("--report and --json name the same file")
    return detector_settings(args)


def _write(args: argparse.Namespace, data: dict) -> None:
    """The report and the JSON, each written atomically; a line on stderr says where."""
    import json

    from stream_miner.report.page import render
    from stream_miner.runtime.atomic_file import write_text_atomically

    if args.json == "-":
        sys.stdout.write(json.dumps(data, ensure_ascii=False, allow_nan=False) + "\n")
        sys.stdout.flush()
    elif args.json is not None:
        write_text_atomically(Path(args.json), json.dumps(data, ensure_ascii=False, allow_nan=False) + "\n")
    if args.report is not None:
        write_text_atomically(args.report, render(data))
    detector = data["detector"]
    written = " and ".join(str(p) for p in (args.report, args.json) if p not in (None, "-"))
    print(
        f"stream-miner: backtest: {detector['emerged']} emerged, {detector['faded']} faded"
        + (f"; written to {written}" if written else ""),
        file=sys.stderr,
    )
