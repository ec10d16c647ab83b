"""Command-line options shared by ``mine`` and ``run``, their value parsers, and the objects
they describe (file layout, message format, basket policy, mining parameters, run settings)."""

from __future__ import annotations

import argparse
import re
import sys
from collections.abc import Sequence
from fractions import Fraction
from typing import TYPE_CHECKING, Any

from stream_miner.decoding.files import FORMATS, FileLayout
from stream_miner.decoding.messages import TIME_UNITS, MessageFormat
from stream_miner.engine.hygiene import DEFAULT_MAX_BASKET_ITEMS, BasketPolicy, Oversize
from stream_miner.engine.limits import DEFAULT_MAX_ITEMSETS
from stream_miner.engine.params import MiningParams
from stream_miner.engine.rules import RANK_MEASURES, RuleFilter

if TYPE_CHECKING:  # numpy and the run loop load only when a command mines, not for --help
    from stream_miner.engine.refresh import Refresh
    from stream_miner.engine.window import CountWindow, TimeWindow
    from stream_miner.runtime.runner import RunSettings


class UsageError(ValueError):
    """Options that do not fit together."""


class DeprecatedAlias(argparse.Action):
    """An old option name kept for one release: hidden from --help, it stores like the new
    name and prints a one-line note naming it."""

    def __init__(self, option_strings: Sequence[str], dest: str, *, new: str, values_map=None, **kwargs):
        self.new = new
        self.values_map = values_map or {}
        kwargs.setdefault("help", argparse.SUPPRESS)
        super().__init__(option_strings, dest, **kwargs)

    def __call__(self, parser, namespace, values, option_string=None) -> None:
        print(f"stream-miner: note: {option_string} is deprecated, use {self.new}", file=sys.stderr)
        setattr(namespace, self.dest, self.values_map.get(values, values))


def add_bad_records_option(group: argparse._ArgumentGroup) -> None:
    """``--bad-records stop|skip`` of the commands that replay a file in one go."""
    group.add_argument(
        "--bad-records",
        choices=("stop", "skip"),
        default="stop",
        help="stop at the first malformed record (exit 2; the default) or set such records aside "
        "and count them",
    )


def add_input_options(group: argparse._ArgumentGroup, *, format_help: str) -> None:
    """How records are laid out: file format, CSV columns, JSON message fields, size limits."""
    group.add_argument("--format", choices=FORMATS, help=f"record format (default: {format_help})")
    group.add_argument(
        "--csv-id-column",
        default="transaction_id",
        help="CSV transaction-id column (default: transaction_id)",
    )
    group.add_argument("--csv-item-column", default="item", help="CSV item column (default: item)")
    group.add_argument("--id-field", default="id", help="JSON field holding the basket id (default: id)")
    group.add_argument("--time-field", default="ts", help="JSON field holding the event time (default: ts)")
    group.add_argument("--items-field", default="items", help="JSON field holding the items (default: items)")
    group.add_argument(
        "--item-key", default="sku", help="key naming an item given as a JSON object (default: sku)"
    )
    group.add_argument(
        "--segment-field", help="JSON field holding a segment label (checked, kept with the basket)"
    )
    group.add_argument(
        "--time-unit",
        choices=TIME_UNITS,
        default="auto",
        help="unit of numeric event times (default: auto, numbers above 1e11 are milliseconds)",
    )
    group.add_argument(
        "--max-message-bytes",
        type=positive_int,
        default=1_000_000,
        metavar="N",
        help="longer messages or lines are set aside (default: 1000000)",
    )
    group.add_argument(
        "--max-basket-items",
        type=positive_int,
        default=DEFAULT_MAX_BASKET_ITEMS,
        metavar="N",
        help="baskets with more distinct items are set aside or truncated "
        f"(default: {DEFAULT_MAX_BASKET_ITEMS})",
    )
    group.add_argument(
        "--oversize",
        choices=[o.value for o in Oversize],
        default=Oversize.SKIP.value,
        help="set oversized baskets aside (skip, the default) or keep their first items (truncate); "
        "both are counted",
    )


def add_window_options(parser: argparse.ArgumentParser, *, wall_clock: bool) -> argparse._ArgumentGroup:
    """Window and tick options (``wall_clock``: also --tick-interval)."""
    window = parser.add_argument_group("window and ticks")
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
        help="how late (in event time) a basket may arrive and still count (default: 0)",
    )
    window.add_argument(
        "--late",
        choices=("dead-letter", "drop"),
        default="dead-letter",
        help="what happens to baskets later than that (default: dead-letter; always counted)",
    )
    tick = window.add_mutually_exclusive_group()
    tick.add_argument("--tick-every", type=positive_int, metavar="N", help="refresh after every N baskets")
    if wall_clock:
        tick.add_argument("--tick-interval", type=duration, metavar="DURATION", help="refresh every DURATION")
    forced = window.add_mutually_exclusive_group()
    forced.add_argument(
        "--full-remine",
        action="store_true",
        help="mine the whole window at every tick instead of choosing per tick by measured cost "
        "(same output; for comparison)",
    )
    forced.add_argument(
        "--always-track",
        action="store_true",
        help="update the tracked itemsets and their border at every tick, never mining in full "
        "(same output; for comparison)",
    )
    return window


def add_mining_options(parser: argparse.ArgumentParser) -> None:
    """Itemset and rule options."""
    found = parser.add_argument_group("itemsets")
    support = found.add_mutually_exclusive_group()
    support.add_argument(
        "--min-support",
        type=fraction,
        metavar="F",
        help="minimum support as a fraction of the window (default: 0.01)",
    )
    support.add_argument(
        "--min-count", type=positive_int, metavar="C", help="minimum support as a basket count"
    )
    found.add_argument("--max-size", type=positive_int, metavar="K", help="largest itemset size to report")
    found.add_argument(
        "--max-len", type=positive_int, action=DeprecatedAlias, new="--max-size", dest="max_size"
    )
    found.add_argument(
        "--max-itemsets",
        type=positive_int,
        default=DEFAULT_MAX_ITEMSETS,
        metavar="N",
        help="stop with an error when a window holds more frequent itemsets "
        f"(default: {DEFAULT_MAX_ITEMSETS:,})",
    )
    found.add_argument(
        "--include", action="append", metavar="ITEM", help="only these items may appear (repeatable)"
    )
    found.add_argument(
        "--exclude", action="append", default=[], metavar="ITEM", help="these items never appear (repeatable)"
    )
    rules = parser.add_argument_group("rules")
    rules.add_argument("--rules", action="store_true", help="also derive association rules")
    rules.add_argument(
        "--min-confidence", type=fraction, metavar="F", help="minimum confidence (default: 0.5)"
    )
    rules.add_argument("--min-lift", type=non_negative_fraction, metavar="X", help="minimum lift")
    rules.add_argument("--max-antecedent", type=positive_int, metavar="N", help="most items on the left")
    rules.add_argument("--max-consequent", type=positive_int, metavar="N", help="most items on the right")
    rules.add_argument(
        "--antecedent-item",
        action="append",
        metavar="ITEM",
        help="only these items may appear on the left (repeatable)",
    )
    rules.add_argument(
        "--consequent-item",
        action="append",
        metavar="ITEM",
        help="only these items may appear on the right (repeatable)",
    )
    rules.add_argument("--max-rules", type=positive_int, metavar="N", help="keep only the N best rules")
    rules.add_argument(
        "--rank-by",
        choices=RANK_MEASURES,
        help="measure that picks the best rules for --max-rules (default: confidence)",
    )


def file_layout(args: argparse.Namespace, fmt: str) -> FileLayout:
    """The record layout the options ask for."""
    message = MessageFormat(
        id_field=args.id_field,
        time_field=args.time_field,
        items_field=args.items_field,
        segment_field=args.segment_field,
        item_key=args.item_key,
        time_unit=args.time_unit,
        max_message_bytes=args.max_message_bytes,
    )
    return FileLayout(fmt, message, args.csv_id_column, args.csv_item_column)


def basket_policy(args: argparse.Namespace) -> BasketPolicy:
    """The basket policy the options ask for."""
    return BasketPolicy(args.max_basket_items, Oversize(args.oversize))


def window_of(args: argparse.Namespace) -> CountWindow | TimeWindow | None:
    """The window the options ask for (None: every basket of the input)."""
    from stream_miner.engine.window import CountWindow, TimeWindow

    if args.window_size is not None:
        return CountWindow(args.window_size)
    if args.window_time is not None:
        return TimeWindow(args.window_time)
    return None


def refresh_mode(args: argparse.Namespace) -> Refresh:
    """How ticks refresh their result: forced by --full-remine or --always-track, else adaptive."""
    from stream_miner.engine.refresh import Refresh

    if args.full_remine:
        return Refresh.FULL
    return Refresh.TRACKED if args.always_track else Refresh.ADAPTIVE


def run_settings(args: argparse.Namespace, **more: Any) -> RunSettings:
    """The loop settings the shared options ask for; ``more`` adds a command's own."""
    from stream_miner.runtime.runner import RunSettings

    more.setdefault("refresh", refresh_mode(args))
    return RunSettings(
        window=window_of(args),
        params=mining_params(args, drift=more.get("drift") is not None),
        policy=basket_policy(args),
        allowed_lateness=args.allowed_lateness,
        drop_late=args.late == "drop",
        tick_every=args.tick_every,
        **more,
    )


def mining_params(args: argparse.Namespace, *, drift: bool = False) -> MiningParams:
    """The mining parameters the options ask for (with ``drift``, --min-confidence and
    --min-lift are the drift detector's thresholds even without --rules)."""
    rules = None
    if args.rules:
        rules = rule_filter(args)
    elif any(
        v is not None
        for v in (
            None if drift else args.min_confidence,
            None if drift else args.min_lift,
            args.max_antecedent,
            args.max_consequent,
            args.antecedent_item,
            args.consequent_item,
            args.max_rules,
            args.rank_by,
        )
    ):
        raise UsageError("rule options need --rules" + ("" if drift else " (or --events-out)"))
    min_support = args.min_support
    if min_support is None and args.min_count is None:
        min_support = Fraction(1, 100)
    return MiningParams(
        min_support=min_support,
        min_count=args.min_count,
        max_size=args.max_size,
        max_itemsets=args.max_itemsets,
        include=None if args.include is None else frozenset(args.include),
        exclude=frozenset(args.exclude),
        rules=rules,
    )


def rule_filter(args: argparse.Namespace) -> RuleFilter:
    """The rule filter the options ask for."""
    return RuleFilter(
        min_confidence=Fraction(1, 2) if args.min_confidence is None else args.min_confidence,
        min_lift=args.min_lift,
        max_antecedent=args.max_antecedent,
        max_consequent=args.max_consequent,
        antecedent_items=None if args.antecedent_item is None else frozenset(args.antecedent_item),
        consequent_items=None if args.consequent_item is None else frozenset(args.consequent_item),
        max_rules=args.max_rules,
        rank_by=args.rank_by or "confidence",
    )


def positive_int(text: str) -> int:
    """A whole number of at least 1."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"{text!r} must be at least 1")
    return value


def fraction(text: str) -> Fraction:
    """An exact number between 0 and 1 (``0.07``, ``7/100``)."""
    value = non_negative_fraction(text)
    if value > 1:
        raise argparse.ArgumentTypeError(f"{text!r} must lie between 0 and 1")
    return value


def non_negative_fraction(text: str) -> Fraction:
    """An exact non-negative number."""
    try:
        value = Fraction(text.strip())
    except (ValueError, ZeroDivisionError):
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"{text!r} must not be negative")
    return value


_DURATION = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*(ms|s|m|h|d)?\s*$")
_UNIT_SECONDS = {"ms": 0.001, "s": 1.0, None: 1.0, "m": 60.0, "h": 3600.0, "d": 86400.0}


def duration(text: Any) -> float:
    """Seconds from ``250ms``, ``30s``, ``5m``, ``2h``, ``1d`` or a plain number of seconds."""
    match = _DURATION.match(str(text))
    if not match:
        raise argparse.ArgumentTypeError(f"{text!r} is not a duration (e.g. 30s, 5m, 2h)")
    return float(match.group(1)) * _UNIT_SECONDS[match.group(2)]
