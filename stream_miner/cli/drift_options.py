"""``run``'s drift options: the detector's settings and where its events go."""

from __future__ import annotations

import argparse
from fractions import Fraction
from pathlib import Path

from stream_miner.cli.options import UsageError, fraction, positive_int
from stream_miner.cli.paths import check_output_file, open_output
from stream_miner.drift.baseline import POLICIES
from stream_miner.drift.settings import MAX_PATTERN_SIZE, DriftSettings
from stream_miner.runtime.event_outbox import EventSink
from stream_miner.runtime.stop_clock import StopClock

DEFAULTS = DriftSettings()


def add_drift_options(parser: argparse.ArgumentParser, *, outputs: bool = True) -> None:
    """Register the drift options of ``run`` (``outputs``: also where events go)."""
    when = "on with --events-out or --metrics-port; " if outputs else ""
    drift = parser.add_argument_group(
        f"drift events ({when}patterns use --min-support, --min-confidence and --min-lift as their "
        "enter thresholds)"
    )
    if outputs:
        _add_event_outputs(drift)
    _add_detector_options(drift)


def _add_event_outputs(drift: argparse._ArgumentGroup) -> None:
    drift.add_argument(
        "--events-out",
        metavar="PATH_OR_KAFKA",
        help="write an event whenever a pattern emerges or fades: append JSON Lines to PATH, "
        "send to kafka://HOST:PORT/TOPIC (keyed by event id), or - for stdout",
    )
    drift.add_argument(
        "--events-format",
        choices=("json", "text"),
        default="json",
        help="with --events-out -: one JSON object per line (default) or one readable line",
    )


def _add_detector_options(drift: argparse._ArgumentGroup) -> None:
    drift.add_argument(
        "--exit-fraction",
        type=fraction,
        default=DEFAULTS.exit_fraction,
        metavar="F",
        help="an active pattern is falling below this fraction of the enter thresholds "
        f"(lift: 1 + F x (lift - 1)); default {float(DEFAULTS.exit_fraction):g}",
    )
    drift.add_argument(
        "--confirm-ticks",
        type=positive_int,
        default=DEFAULTS.confirm_ticks,
        metavar="N",
        help=f"ticks in a row a move must hold before it is tested (default {DEFAULTS.confirm_ticks})",
    )
    drift.add_argument(
        "--false-discovery-rate",
        type=fraction,
        default=Fraction(str(DEFAULTS.false_discovery_rate)),
        metavar="Q",
        help="share of reported moves allowed to be chance, per tick (Benjamini-Hochberg; "
        f"default {DEFAULTS.false_discovery_rate:g})",
    )
    drift.add_argument(
        "--baseline",
        choices=POLICIES,
        default=DEFAULTS.baseline,
        help="what the window is compared with: the previous window that shares no basket with "
        "it (default), the first full window, or a decayed history of past windows",
    )
    drift.add_argument(
        "--half-life",
        type=float,
        default=DEFAULTS.half_life,
        metavar="WINDOWS",
        help=f"--baseline decayed: a past window's weight halves after this many windows "
        f"(default {DEFAULTS.half_life:g})",
    )
    drift.add_argument(
        "--pattern-size",
        type=positive_int,
        default=DEFAULTS.max_size,
        metavar="K",
        help=f"largest pattern followed, 2 to {MAX_PATTERN_SIZE} items (default {DEFAULTS.max_size})",
    )


def drift_wanted(args: argparse.Namespace) -> bool:
    """Whether the options ask for drift detection (events or metrics)."""
    return args.events_out is not None or getattr(args, "metrics_port", None) is not None


def drift_settings(args: argparse.Namespace) -> DriftSettings | None:
    """The detector's settings (None when no drift detection is asked for)."""
    if args.events_format == "text" and args.events_out != "-":
        raise UsageError("--events-format text is for --events-out - (files and topics get JSON)")
    if not drift_wanted(args):
        return None
    return detector_settings(args)


def detector_settings(args: argparse.Namespace) -> DriftSettings:
    """The detector's settings the options ask for."""
    try:
        return DriftSettings(
            min_confidence=Fraction(1, 2) if args.min_confidence is None else args.min_confidence,
            min_lift=Fraction(1) if args.min_lift is None else args.min_lift,
            exit_fraction=args.exit_fraction,
            confirm_ticks=args.confirm_ticks,
            false_discovery_rate=float(args.false_discovery_rate),
            baseline=args.baseline,
            half_life=args.half_life,
            max_size=args.pattern_size,
        )
    except ValueError as error:
        raise UsageError(str(error)) from None


def check_events_out(args: argparse.Namespace) -> None:
    """The events file can be written (before anything is read)."""
    target = args.events_out
    if target is not None and target != "-" and not target.startswith("kafka://"):
        check_output_file(Path(target), "--events-out")


def events_sink(args: argparse.Namespace, stop: StopClock) -> EventSink | None:
    """The sink ``--events-out`` names (None: no events written)."""
    target = args.events_out
    if target is None:
        return None
    if target == "-":
        from stream_miner.cli.event_lines import EventLines

        return EventLines(as_text=args.events_format == "text")
    from stream_miner.connectors.json_lines import JsonLinesFile

    def to_kafka(url: str) -> EventSink:
        from stream_miner.connectors.kafka_source import client_options  # Kafka only when asked for
        from stream_miner.connectors.sinks import KafkaEvents

        return KafkaEvents(url, client_options(args.kafka_option), stop=stop)

    return open_output(target, "--events-out", to_kafka, JsonLinesFile)
