"""The ``demo`` command: the live pipeline on a generated stream with planted changes, no
outside service needed.

The stream (:mod:`stream_miner.simulate.tidemoor`) is served by a
:class:`~stream_miner.connectors.generated_source.GeneratedSource` at a steady pace to the
same :class:`~stream_miner.runtime.runner.Runner` as ``run``, with drift detection, the
metrics and the status page on one local HTTP server. Events are printed as readable lines
as they are raised; at the end a summary sets them beside what was planted.
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Iterator
from contextlib import closing
from fractions import Fraction
from typing import TYPE_CHECKING, TextIO

from stream_miner.cli.run import DEFAULT_METRICS_HOST, port_number
from stream_miner.runtime.health import plural
from stream_miner.runtime.protocols import TickReport

if TYPE_CHECKING:
    from stream_miner.decoding.records import Basket
    from stream_miner.drift.events import DriftEvent
    from stream_miner.simulate.tidemoor import Planted

BASE_RATE = 200  # baskets a second at --speed 1: one pass in about a minute
WINDOW, TICK_EVERY = 2_000, 200
MIN_SUPPORT, MIN_CONFIDENCE, MIN_LIFT = Fraction(5, 100), Fraction(1, 2), Fraction(3, 2)
FIRST_TIME = 1_968_044_400.0  # event time of the first basket (an invented day, 06:00 UTC)
SPACING = 2.5  # seconds of event time between baskets


def add_demo_parser(commands: argparse._SubParsersAction) -> None:
    """Register ``demo`` and its options."""
    demo = commands.add_parser(
        "demo",
        allow_abbrev=False,
        help="watch drift detection find planted changes in a generated stream (nothing to set up)",
        description="Replay a day of an invented market's checkouts, with co-purchase changes "
        "planted in it, through the same live pipeline as `run`: a sliding window, ticks, drift "
        "events printed as they are raised, Prometheus metrics and a status page on this machine. "
        "Ends by itself after about a minute with a summary of what was found against what was planted.",
    )
    demo.set_defaults(handler=run_demo)
    demo.add_argument(
        "--speed",
        type=_speed,
        default=1.0,
        metavar="X",
        help=f"replay X times faster ({BASE_RATE} baskets a second at 1, the default)",
    )
    demo.add_argument(
        "--forever", action="store_true", help="replay the day again and again until stopped (Ctrl-C)"
    )
    demo.add_argument("--seed", type=int, default=7, metavar="N", help="seed of the generated stream")
    demo.add_argument(
        "--metrics-port",
        type=port_number,
        default=0,
        metavar="PORT",
        help="serve the metrics and the status page on this port (default 0: a free port, printed)",
    )
    demo.add_argument(
        "--metrics-host",
        default=DEFAULT_METRICS_HOST,
        metavar="HOST",
        help=f"the address the server listens on (default: {DEFAULT_METRICS_HOST})",
    )


def _speed(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not 0 < value < float("inf"):
        raise argparse.ArgumentTypeError(f"{text!r} must be a positive number")
    return value


def run_demo(args: argparse.Namespace) -> int:
    """The ``demo`` command."""
    from stream_miner.cli.event_lines import EventLines
    from stream_miner.cli.run import serve_status
    from stream_miner.cli.signals import stop_on_signals
    from stream_miner.connectors.dead_letters import DeadLetterCounter
    from stream_miner.connectors.generated_source import GeneratedSource
    from stream_miner.drift.detector import DriftSettings
    from stream_miner.engine.params import MiningParams
    from stream_miner.engine.window import TimeWindow
    from stream_miner.metrics import RunMetrics, TopPatterns
    from stream_miner.runtime.runner import Runner, RunSettings
    from stream_miner.simulate.tidemoor import BASKETS, CHANGES
    from stream_miner.status import StatusBoard

    rate = BASE_RATE * args.speed
    settings = RunSettings(
        window=TimeWindow(WINDOW * SPACING),
        params=MiningParams(min_support=MIN_SUPPORT),
        tick_every=TICK_EVERY,
        drift=DriftSettings(min_confidence=MIN_CONFIDENCE, min_lift=MIN_LIFT),
    )
    out = sys.stdout
    _introduce(out, rate, args.forever, CHANGES)
    metrics, board = RunMetrics(TopPatterns()), StatusBoard()
    found = FoundEvents()
    progress = DemoProgress(sys.stderr, BASKETS)
    with closing(serve_status(args.metrics_host, args.metrics_port, metrics, board)):
        source = GeneratedSource(
            "the Tidemoor market",
            _stream(args.seed, args.forever),
            pace=rate,
            total=None if args.forever else BASKETS,
        )
        runner = Runner(
            settings,
            source,
            DeadLetterCounter(),
            [metrics, board, found, progress],
            events=EventLines(out, as_text=True),
        )
        metrics.watch(runner.figures)
        with stop_on_signals(runner.stop):
            code = runner.run()
    _summarise(out, found, CHANGES, BASKETS, forever=args.forever)
    return code


def _stream(seed: int, forever: bool) -> Iterator[Basket]:
    """The scenario's baskets with ids and event times; with ``forever``, pass after pass
    (a new seed each)."""
    from stream_miner.decoding.records import Basket

    number = 0
    for repeat in range(sys.maxsize if forever else 1):
        for items in _scenario(seed + repeat):
            yield Basket(items, f"tidemoor-{number + 1:07d}", FIRST_TIME + number * SPACING)
            number += 1


def _scenario(seed: int) -> Iterator[list[str]]:
    """One pass of the generated stream (the one call to swap for another scenario)."""
    from stream_miner.simulate.tidemoor import demo_baskets

    return demo_baskets(seed)


def _introduce(out: TextIO, rate: float, forever: bool, changes: tuple[Planted, ...]) -> None:
    from stream_miner.simulate.tidemoor import BASKETS

    length = "again and again until stopped" if forever else f"about {BASKETS / rate:.0f} s"
    print(
        f"Tidemoor harbour market (invented): {BASKETS:,} checkouts of one day, replayed at "
        f"{rate:,.0f} a second ({length}).\n"
        f"Window: the last {WINDOW * SPACING / 60:.0f} minutes of event time ({WINDOW:,} baskets), a tick "
        f"every {TICK_EVERY} baskets; a pattern needs support "
        f"{float(MIN_SUPPORT):.0%}, confidence {float(MIN_CONFIDENCE):g} and lift {float(MIN_LIFT):g}.\n"
        "Planted:",
        file=out,
    )
    for change in changes:
        print(f"  {' + '.join(change.items)}: {change.how}, from basket {change.at:,}", file=out)
    print("Changes are printed as they are found:", file=out, flush=True)


class FoundEvents:
    """Every drift event with the number of baskets taken when it was raised."""

    def __init__(self) -> None:
        self.seen: list[tuple[int, DriftEvent]] = []
        self.consumed = 0

    def on_tick(self, report: TickReport) -> None:
        self.consumed = report.consumed
        self.seen.extend((report.consumed, event) for event in report.events)


class DemoProgress:
    """A line on ``out`` each time another tenth of a pass has been taken."""

    def __init__(self, out: TextIO, per_pass: int) -> None:
        self.out = out
        self.step = max(1, per_pass // 10)
        self.per_pass = per_pass
        self.next = self.step
        self.emerged = self.faded = 0

    def on_tick(self, report: TickReport) -> None:
        for event in report.events:
            self.emerged += event.kind == "emerged"
            self.faded += event.kind == "faded"
        if report.consumed < self.next:
            return
        self.next = (report.consumed // self.step + 1) * self.step
        taken = (report.consumed - 1) % self.per_pass + 1
        repeat = (report.consumed - 1) // self.per_pass
        where = f"pass {repeat + 1}, " if repeat else ""
        print(
            f"stream-miner: demo: {where}{taken:,} of {self.per_pass:,} baskets "
            f"({taken / self.per_pass:.0%}), tick {report.tick.number}; "
            f"{plural(sum(p.state == 'active' for p in report.patterns), 'pattern')} active; "
            f"{self.emerged} emerged, {self.faded} faded so far",
            file=self.out,
            flush=True,
        )


def _summarise(
    out: TextIO, found: FoundEvents, changes: tuple[Planted, ...], per_pass: int, *, forever: bool
) -> None:
    """What was found beside what was planted (the first pass), and events nobody planted."""
    first = [(n, e) for n, e in found.seen if n <= per_pass]
    print(f"\nSummary after {min(found.consumed, per_pass):,} baskets of the first pass:", file=out)
    matched: set[int] = set()
    hits = 0
    for change in changes:
        which = next(
            (
                k
                for k, (n, e) in enumerate(first)
                if k not in matched and e.items == tuple(sorted(change.items)) and e.kind == change.kind
            ),
            None,
        )
        planted = f"{' + '.join(change.items)}: planted at basket {change.at:,} ({change.how})"
        if change.kind is None:
            raised = any(change.items[0] in e.items for _, e in first)
            hits += not raised
            told = "an event raised" if raised else "no event raised"
            print(f"  {'WRONG' if raised else 'right':<7}{'none':<9}{planted}, {told}", file=out)
        elif which is None:
            print(f"  {'MISSED':<7}{change.kind:<9}{planted}, not raised", file=out)
        else:
            matched.add(which)
            hits += 1
            print(f"  {'found':<7}{change.kind:<9}{planted}, raised at basket {first[which][0]:,}", file=out)
    extra = [(n, e) for k, (n, e) in enumerate(first) if k not in matched]
    for n, event in extra:
        print(
            f"  {'extra':<7}{event.kind:<9}{' + '.join(event.items)}: not planted, raised at basket {n:,}",
            file=out,
        )
    print(f"{hits} of {len(changes)} planted changes told right; {len(extra)} events not planted.", file=out)
    if forever and found.consumed > per_pass:
        later = len(found.seen) - len(first)
        print(
            f"After the first pass: {later} more events in {found.consumed - per_pass:,} baskets.", file=out
        )
    out.flush()
