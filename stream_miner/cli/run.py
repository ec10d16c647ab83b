"""The ``stream-miner run`` command: the long-running service over a stream of checkouts."""

from __future__ import annotations

import argparse
import signal
import sys
import tomllib
from pathlib import Path
from typing import Any

from stream_miner.cli.options import (
    UsageError,
    add_hygiene_options,
    add_mining_options,
    basket_policy,
    duration,
    mining_params,
    positive_int,
)
from stream_miner.connectors.dead_letters import DeadLetterCounter, DeadLetterFile
from stream_miner.connectors.file_source import FileSource
from stream_miner.connectors.kafka_source import KafkaSource, client_options
from stream_miner.connectors.sinks import KafkaDeadLetters
from stream_miner.decoding.messages import TIME_UNITS, MessageFormat
from stream_miner.engine.window import CountWindow, TimeWindow
from stream_miner.runtime.checkpoint import CheckpointError
from stream_miner.runtime.runner import Runner, RunSettings

FILE_FORMATS = ("jsonl", "fimi", "csv")


def add_run_parser(commands: argparse._SubParsersAction) -> None:
    """Register ``run`` and its options."""
    run = commands.add_parser(
        "run",
        help="run continuously over a stream of checkouts (Kafka topic, file or stdin)",
        description="Keep an exact sliding window over a stream of checkouts, refresh the "
        "frequent itemsets and rules at every tick, write a snapshot, and checkpoint so that "
        "a restart loses and double-counts nothing. Options may also come from a TOML file "
        "(--config) with the same names; options on the command line win.",
    )
    run.set_defaults(handler=run_run)
    run.add_argument("--config", metavar="FILE", help="TOML file with option values")
    source = run.add_argument_group("source")
    source.add_argument("--source", help="kafka://HOST:PORT/TOPIC, file:PATH, or - for stdin")
    source.add_argument("--group", help="Kafka consumer group (required for a Kafka source)")
    source.add_argument(
        "--kafka-option",
        action="append",
        default=[],
        metavar="KEY=VALUE",
        help="any kafka-python client option (repeatable); VALUE env:NAME reads it "
        "from the environment variable NAME",
    )
    source.add_argument(
        "--format", choices=FILE_FORMATS, default="jsonl", help="record format (default: jsonl)"
    )
    source.add_argument("--follow", action="store_true", help="keep reading as the file grows")
    source.add_argument(
        "--pace", type=float, metavar="PER_SECOND", help="replay at most this many records a second"
    )
    source.add_argument("--csv-id-column", default="transaction_id", help="CSV transaction-id column")
    source.add_argument("--csv-item-column", default="item", help="CSV item column")
    fields = run.add_argument_group("messages (JSON)")
    fields.add_argument("--id-field", default="id")
    fields.add_argument("--time-field", default="ts")
    fields.add_argument("--items-field", default="items")
    fields.add_argument("--item-key", default="sku", help="key naming an item given as an object")
    fields.add_argument("--segment-field")
    fields.add_argument("--time-unit", choices=TIME_UNITS, default="auto", help="unit of numeric event times")
    fields.add_argument("--max-message-bytes", type=positive_int, default=1_000_000)
    add_hygiene_options(fields)
    window = run.add_argument_group("window and ticks")
    size = window.add_mutually_exclusive_group()
    size.add_argument("--window-size", type=positive_int, metavar="N", help="the last N baskets")
    size.add_argument(
        "--window-time", type=duration, metavar="DURATION", help="the last DURATION of event time"
    )
    window.add_argument(
        "--allowed-lateness",
        type=duration,
        default=0.0,
        metavar="DURATION",
        help="how late (in event time) a basket may arrive and still count",
    )
    window.add_argument(
        "--late",
        choices=("dead-letter", "drop"),
        default="dead-letter",
        help="what happens to baskets later than that (always counted)",
    )
    tick = window.add_mutually_exclusive_group()
    tick.add_argument("--tick-every", type=positive_int, metavar="N", help="refresh after every N baskets")
    tick.add_argument("--tick-interval", type=duration, metavar="DURATION", help="refresh every DURATION")
    add_mining_options(run)
    state = run.add_argument_group("state and output")
    state.add_argument("--checkpoint-dir", type=Path, metavar="DIR", help="where checkpoints are kept")
    state.add_argument("--checkpoint-interval", type=duration, default=30.0, metavar="DURATION")
    state.add_argument(
        "--start-fresh", action="store_true", help="ignore (and later replace) an existing checkpoint"
    )
    state.add_argument("--snapshot-out", type=Path, metavar="PATH", help="rewrite this file after every tick")
    state.add_argument(
        "--dead-letter-out",
        metavar="PATH_OR_KAFKA",
        help="append bad records to this JSON Lines file, or send them to "
        "kafka://HOST:PORT/TOPIC (default: count and report them)",
    )


def apply_config(parser: argparse.ArgumentParser, argv: list[str]) -> None:
    """Load ``--config`` (if given) as defaults of the ``run`` parser."""
    if "--config" not in argv and not any(a.startswith("--config=") for a in argv):
        return
    pre = argparse.ArgumentParser(add_help=False)
    pre.add_argument("--config")
    path = pre.parse_known_args(argv)[0].config
    try:
        with open(path, "rb") as stream:
            values = tomllib.load(stream)
    except OSError as error:
        raise UsageError(f"cannot read config {path!r}: {error.strerror}") from None
    except tomllib.TOMLDecodeError as error:
        raise UsageError(f"config {path!r} is not valid TOML: {error}") from None
    known = {action.dest: action for action in parser._actions}
    defaults: dict[str, Any] = {}
    for key, value in values.items():
        dest = key.replace("-", "_")
        action = known.get(dest)
        if action is None or dest in ("help", "config"):
            raise UsageError(f"config {path!r}: unknown option {key!r}")
        if isinstance(value, list):
            defaults[dest] = [str(v) for v in value]
        elif isinstance(value, bool) or action.type is None:
            defaults[dest] = value
        else:
            defaults[dest] = str(value)  # argparse converts string defaults with the option's type
    parser.set_defaults(**defaults)


def run_run(args: argparse.Namespace) -> int:
    """The ``run`` command."""
    settings = _settings(args)
    message_format = MessageFormat(
        id_field=args.id_field,
        time_field=args.time_field,
        items_field=args.items_field,
        segment_field=args.segment_field,
        item_key=args.item_key,
        time_unit=args.time_unit,
        max_message_bytes=args.max_message_bytes,
        # oversized baskets become dead letters when skipped; truncation is the hygiene's job
        max_items=args.max_basket_items if args.oversize == "skip" else 1 << 30,
    )
    source = _source(args, message_format)
    dead_letters = _dead_letters(args)
    runner = Runner(settings, source, dead_letters)
    previous = {sig: signal.signal(sig, lambda *_: runner.stop()) for sig in (signal.SIGTERM, signal.SIGINT)}
    try:
        return runner.run()
    except CheckpointError as error:
        print(f"stream-miner: error: {error}", file=sys.stderr)
        return 2
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)
        source.close()
        dead_letters.close()


def _dead_letters(args: argparse.Namespace) -> DeadLetterCounter | KafkaDeadLetters:
    target = args.dead_letter_out
    if target is None:
        return DeadLetterCounter()
    if target.startswith("kafka://"):
        return KafkaDeadLetters(target, client_options(args.kafka_option))
    return DeadLetterFile(target)


def _settings(args: argparse.Namespace) -> RunSettings:
    if args.source is None:
        raise UsageError("give --source (kafka://HOST:PORT/TOPIC, file:PATH or -)")
    if args.window_size is None and args.window_time is None:
        raise UsageError("give --window-size N or --window-time DURATION")
    if args.tick_every is None and args.tick_interval is None:
        raise UsageError("give --tick-every N or --tick-interval DURATION")
    window = CountWindow(args.window_size) if args.window_size else TimeWindow(args.window_time)
    return RunSettings(
        window=window,
        params=mining_params(args),
        policy=basket_policy(args),
        allowed_lateness=args.allowed_lateness,
        drop_late=args.late == "drop",
        tick_every=args.tick_every,
        tick_interval=args.tick_interval,
        checkpoint_dir=args.checkpoint_dir,
        checkpoint_interval=args.checkpoint_interval,
        start_fresh=args.start_fresh,
        snapshot_out=args.snapshot_out,
    )


def _source(args: argparse.Namespace, message_format: MessageFormat) -> FileSource | KafkaSource:
    spec = args.source
    if spec.startswith("kafka://"):
        if not args.group:
            raise UsageError("a Kafka source needs --group")
        return KafkaSource(spec, args.group, message_format, client_options(args.kafka_option))
    if spec == "-" or spec.startswith("file:"):
        return FileSource(
            "-" if spec == "-" else spec.removeprefix("file:"),
            args.format,
            message_format,
            follow=args.follow,
            pace=args.pace,
            csv_id_column=args.csv_id_column,
            csv_item_column=args.csv_item_column,
        )
    raise UsageError(f"unsupported --source {spec!r}: use kafka://HOST:PORT/TOPIC, file:PATH or -")
