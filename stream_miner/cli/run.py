"""The ``run`` command: the long-running service over a stream of checkouts."""

from __future__ import annotations

import argparse
import sys
from contextlib import ExitStack, closing
from pathlib import Path
from typing import TYPE_CHECKING, Any

from stream_miner.cli.drift_options import (
    add_drift_options,
    check_events_out,
    drift_settings,
    events_sink,
)
from stream_miner.cli.options import (
    UsageError,
    add_input_options,
    add_mining_options,
    add_window_options,
    duration,
    file_layout,
    positive_int,
    run_settings,
)
from stream_miner.cli.paths import check_directory, check_output_file, open_output
from stream_miner.cli.reporting import SnapshotWriter, TickLine
from stream_miner.cli.run_cluster import Member, check_cluster_options
from stream_miner.cli.signals import stop_on_signals
from stream_miner.connectors.dead_letters import DeadLetterCounter, DeadLetterFile
from stream_miner.connectors.file_source import FileSource
from stream_miner.decoding.files import detect_format
from stream_miner.runtime.protocols import DeadLetterSink, Source, StoppedWaiting, TickListener
from stream_miner.runtime.stop_clock import DEFAULT_STOP_WITHIN, StopClock

if TYPE_CHECKING:
    from stream_miner.connectors.http_server import HttpServer
    from stream_miner.metrics import RunMetrics
    from stream_miner.runtime.runner import RunSettings
    from stream_miner.status import StatusBoard

DEFAULT_METRICS_HOST = "127.0.0.1"


def add_run_parser(commands: argparse._SubParsersAction) -> None:
    """Register ``run`` and its options."""
    run = commands.add_parser(
        "run",
        allow_abbrev=False,
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
        help="any kafka-python client option (repeatable); VALUE env:NAME reads it from the "
        "environment variable NAME",
    )
    source.add_argument(
        "--dedup-lookback",
        type=int,
        default=1000,
        metavar="N",
        help="on taking a partition over from another group member, read its last N messages "
        "before the handover again to learn their basket ids, so a repeat arriving after the "
        "handover is still recognised (default 1000; 0: off)",
    )
    source.add_argument(
        "--accept-new-log",
        action="store_true",
        help="Kafka: the topic's log was lost, cut or recreated: drop the checkpoint (like "
        "--start-fresh) and read every partition from the log's first offset, whatever the group "
        "committed (for the one restart after the loss)",
    )
    source.add_argument(
        "--accept-gap",
        action="store_true",
        help="Kafka: keep the window, and read the partitions whose log no longer holds the "
        "checkpointed or committed offsets on from the log's first offset (for the one restart "
        "after the loss)",
    )
    source.add_argument("--follow", action="store_true", help="keep reading as the file grows")
    source.add_argument(
        "--pace", type=float, metavar="PER_SECOND", help="replay at most this many records a second"
    )
    add_input_options(
        run.add_argument_group("records"), format_help="from a file's name; jsonl for stdin and Kafka"
    )
    add_window_options(run, wall_clock=True)
    add_mining_options(run)
    add_drift_options(run)
    state = run.add_argument_group("state and output")
    state.add_argument("--checkpoint-dir", type=Path, metavar="DIR", help="where checkpoints are kept")
    state.add_argument(
        "--checkpoint-interval",
        type=duration,
        default=30.0,
        metavar="DURATION",
        help="checkpoint at the first tick after this much wall-clock time (default: 30s)",
    )
    state.add_argument(
        "--start-fresh", action="store_true", help="ignore (and later replace) an existing checkpoint"
    )
    state.add_argument("--snapshot-out", type=Path, metavar="PATH", help="rewrite this file after every tick")
    state.add_argument(
        "--dead-letter-out",
        metavar="PATH_OR_KAFKA",
        help="append bad records to this JSON Lines file, or send them to kafka://HOST:PORT/TOPIC "
        "(default: count and report them)",
    )
    state.add_argument("--quiet", action="store_true", help="no line per tick on stderr")
    state.add_argument(
        "--stop-within",
        type=duration,
        default=DEFAULT_STOP_WITHIN,
        metavar="DURATION",
        help="after SIGTERM or SIGINT, end within this long even when a broker does not answer: "
        "the local checkpoint is always written; committing offsets, sending dead letters and "
        f"leaving the group get what is left (default: {DEFAULT_STOP_WITHIN:g}s)",
    )
    group = run.add_argument_group("several processes")
    group.add_argument(
        "--coordination-topic",
        metavar="TOPIC",
        help="Kafka topic (one partition) the members of --group share: each member mines the window "
        "of its own partitions and one of them merges the exact global result (--snapshot-out, "
        "--events-out and the pattern metrics then hold that). Needs --window-time and "
        "--tick-interval, which then counts event time",
    )
    group.add_argument(
        "--tick-wait",
        type=duration,
        metavar="DURATION",
        help="how long the aggregating member waits for every partition's part of a tick before "
        "it closes the tick as incomplete (default: 30s)",
    )
    metrics = run.add_argument_group("metrics")
    metrics.add_argument(
        "--metrics-port",
        type=port_number,
        metavar="PORT",
        help="serve Prometheus metrics on http://HOST:PORT/metrics and a status page on http://HOST:PORT/ "
        "for the whole run (0: a free port, printed at the start)",
    )
    metrics.add_argument(
        "--metrics-host",
        metavar="HOST",
        help=f"the address the metrics server listens on (default: {DEFAULT_METRICS_HOST}: this machine)",
    )
    metrics.add_argument(
        "--metrics-top-k",
        type=positive_int,
        metavar="K",
        help="the K strongest active patterns get series of their own (default: 20, at most 100)",
    )


def apply_config(parser: argparse.ArgumentParser, argv: list[str]) -> None:
    """Load ``--config`` (if given) as defaults of the ``run`` parser."""
    if "--config" not in argv and not any(a.startswith("--config=") for a in argv):
        return
    pre = argparse.ArgumentParser(add_help=False, allow_abbrev=False)
    pre.add_argument("--config")
    path = pre.parse_known_args(argv)[0].config
    import tomllib  # only with --config: keeps start-up quick

    try:
        with open(path, "rb") as stream:
            values = tomllib.load(stream)
    except OSError as error:
        raise UsageError(f"cannot read config {path!r}: {error.strerror}") from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as error:
        raise UsageError(f"config {path!r} is not valid TOML: {error}") from None
    known = {
        option.removeprefix("--"): action for action in parser._actions for option in action.option_strings
    }
    defaults: dict[str, Any] = {}
    for key, value in values.items():
        action = known.get(key.replace("_", "-"))
        if action is None or action.dest in ("help", "config"):
            raise UsageError(f"config {path!r}: unknown option {key!r}")
        defaults[action.dest] = _config_value(action, value, f"config {path!r}: {key}")
    parser.set_defaults(**defaults)


def _config_value(action: argparse.Action, value: object, where: str) -> object:
    """A TOML value as the option's default, checked against the option's kind: a flag takes
    true or false, a repeatable option a list, any other a string or a number (converted by
    the option's own parser), one of its choices if it has them."""
    if action.nargs == 0:
        if not isinstance(value, bool):
            raise UsageError(f"{where} must be true or false")
        return value
    if isinstance(action, argparse._AppendAction):
        if not isinstance(value, list) or not all(_scalar(v) for v in value):
            raise UsageError(f"{where} must be a list of strings")
        return [str(v) for v in value]
    if not _scalar(value):
        raise UsageError(f"{where} must be a string or a number")
    if action.choices is not None and str(value) not in action.choices:
        raise UsageError(f"{where} must be one of {', '.join(map(str, action.choices))}")
    return str(value)  # argparse converts string defaults with the option's type


def _scalar(value: object) -> bool:
    return isinstance(value, str | int | float) and not isinstance(value, bool)


def run_run(args: argparse.Namespace) -> int:
    """The ``run`` command."""
    from stream_miner.runtime.runner import Runner  # numpy and the engine: only to mine

    check_cluster_options(args)
    settings = _settings(args)
    _check_outputs(args)
    metrics = _metrics(args)
    board = _status_board(metrics)
    stop = StopClock(args.stop_within)
    with ExitStack() as resources, stop_on_signals(stop.set):
        if metrics is not None and board is not None:  # listening first: a port in use stops the run
            server = serve_status(args.metrics_host, args.metrics_port, metrics, board)
            resources.enter_context(closing(server))
        if args.source is not None and args.source.startswith("kafka://"):
            from stream_miner.engine.compiled_start import start_loading_compiled_loops

            start_loading_compiled_loops()  # while the member connects and joins its group
        try:
            source = resources.enter_context(closing(_source(args, stop)))
            dead_letters = resources.enter_context(closing(_dead_letters(args, stop)))
            events = events_sink(args, stop)
            if events is not None:
                resources.enter_context(closing(events))
        except StoppedWaiting:
            return 0  # stopped while waiting for a broker to answer
        listeners: list[TickListener] = []
        if args.snapshot_out is not None:
            listeners.append(SnapshotWriter(args.snapshot_out))
        if not args.quiet:
            listeners.append(TickLine(sys.stderr))
        if metrics is not None and board is not None:
            listeners += [metrics, board]
        if args.coordination_topic is not None:
            member = Member(args, settings, source, dead_letters, listeners, events, stop)  # type: ignore[arg-type]
            resources.callback(member.close)
            member.start()
            runner: Runner = member.runner
        else:
            runner = Runner(settings, source, dead_letters, listeners, events=events)
        if metrics is not None:
            metrics.watch(runner.figures)

        def stop_both() -> None:
            stop.set()  # starts the clock: waits for brokers get what is left of --stop-within
            runner.stop()

        if stop.is_set():
            runner.stop()
        with stop_on_signals(stop_both):
            return runner.run()


def _settings(args: argparse.Namespace) -> RunSettings:
    if args.source is None:
        raise UsageError("give --source (kafka://HOST:PORT/TOPIC, file:PATH or -)")
    if args.window_size is None and args.window_time is None:
        raise UsageError("give --window-size N or --window-time DURATION")
    if args.tick_every is None and args.tick_interval is None:
        raise UsageError("give --tick-every N or --tick-interval DURATION")
    return run_settings(
        args,
        tick_interval=args.tick_interval,
        checkpoint_dir=args.checkpoint_dir,
        checkpoint_interval=args.checkpoint_interval,
        start_fresh=args.start_fresh or args.accept_new_log,
        drift=drift_settings(args),
    )


def _check_outputs(args: argparse.Namespace) -> None:
    """Every output path can be written, before anything is read."""
    if args.checkpoint_dir is not None:  # first: it is made if missing, and may hold the others
        check_directory(args.checkpoint_dir, "--checkpoint-dir")
    if args.snapshot_out is not None:
        check_output_file(args.snapshot_out, "--snapshot-out")
    target = args.dead_letter_out
    if target is not None and not target.startswith("kafka://"):
        check_output_file(Path(target), "--dead-letter-out")
    check_events_out(args)


def _metrics(args: argparse.Namespace) -> RunMetrics | None:
    """The metrics the options ask for (None: no --metrics-port)."""
    if args.metrics_port is None:
        for option, value in (("--metrics-host", args.metrics_host), ("--metrics-top-k", args.metrics_top_k)):
            if value is not None:
                raise UsageError(f"{option} needs --metrics-port")
        return None
    from stream_miner.metrics import DEFAULT_TOP_K, MAX_TOP_K, RunMetrics, TopPatterns  # only when asked for

    k = DEFAULT_TOP_K if args.metrics_top_k is None else args.metrics_top_k
    if k > MAX_TOP_K:
        raise UsageError(f"--metrics-top-k {k}: at most {MAX_TOP_K} patterns get series of their own")
    return RunMetrics(TopPatterns(k))


def _status_board(metrics: RunMetrics | None) -> StatusBoard | None:
    """The status page's listener, beside the metrics (None without them)."""
    if metrics is None:
        return None
    from stream_miner.status import StatusBoard  # only when asked for

    return StatusBoard()


def serve_status(host: str | None, port: int, metrics: RunMetrics, board: StatusBoard) -> HttpServer:
    """One server for the metrics and the status page, listening; both addresses are said on
    stderr. A port that cannot be listened on is a usage error."""
    from stream_miner.connectors.http_server import HttpServer  # only when asked for
    from stream_miner.status import status_routes

    host = host or DEFAULT_METRICS_HOST
    try:
        server = HttpServer(host, port, {"/metrics": metrics.exposition, **status_routes(board)})
    except OSError as error:
        cause = error.strerror or str(error)
        raise UsageError(f"--metrics-port {port}: cannot listen on {host} ({cause})") from None
    print(f"stream-miner: metrics on {server.url('/metrics')}", file=sys.stderr, flush=True)
    print(f"stream-miner: status page on {server.url('/')}", file=sys.stderr, flush=True)
    return server


def port_number(text: str) -> int:
    """A TCP port: 0 (any free one) to 65535."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a port number") from None
    if not 0 <= value <= 65535:
        raise argparse.ArgumentTypeError(f"{text!r} must lie between 0 and 65535")
    return value


def _dead_letters(args: argparse.Namespace, stop: StopClock) -> DeadLetterSink:
    target = args.dead_letter_out
    if target is None:
        return DeadLetterCounter()

    def to_kafka(url: str) -> DeadLetterSink:
        from stream_miner.connectors.kafka_source import client_options  # Kafka only when asked for
        from stream_miner.connectors.sinks import KafkaDeadLetters

        return KafkaDeadLetters(url, client_options(args.kafka_option), stop=stop)

    return open_output(target, "--dead-letter-out", to_kafka, DeadLetterFile)


def _source(args: argparse.Namespace, stop: StopClock) -> Source:
    """The source the options name (``stop`` ends a wait for a broker: StoppedWaiting)."""
    spec = args.source
    if args.dedup_lookback < 0:
        raise UsageError(f"--dedup-lookback must not be negative, got {args.dedup_lookback}")
    if spec.startswith("kafka://"):
        if not args.group:
            raise UsageError("a Kafka source needs --group")
        from stream_miner.connectors.kafka_log_check import Accept
        from stream_miner.connectors.kafka_source import KafkaSource, client_options

        if args.accept_new_log and args.accept_gap:
            raise UsageError("--accept-new-log drops the window, --accept-gap keeps it: give one")
        accept = Accept.NEW_LOG if args.accept_new_log else Accept.GAP if args.accept_gap else Accept.NOTHING
        message = file_layout(args, "jsonl").message
        options = client_options(args.kafka_option)
        return KafkaSource(
            spec, args.group, message, options, stop=stop, accept=accept, lookback=args.dedup_lookback
        )
    if args.accept_new_log or args.accept_gap:
        raise UsageError("--accept-new-log and --accept-gap are for a Kafka source")
    if spec == "-" or spec.startswith("file:"):
        path = "-" if spec == "-" else spec.removeprefix("file:")
        fmt = args.format or ("jsonl" if path == "-" else detect_format(path))
        return FileSource(path, file_layout(args, fmt), follow=args.follow, pace=args.pace)
    raise UsageError(f"unsupported --source {spec!r}: use kafka://HOST:PORT/TOPIC, file:PATH or -")
