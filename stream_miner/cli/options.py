"""Command-line options shared by ``mine`` and ``run``, and their parsers."""

from __future__ import annotations

import argparse
import re
from fractions import Fraction

from stream_miner.engine.hygiene import DEFAULT_MAX_BASKET_ITEMS, BasketPolicy, Oversize
from stream_miner.engine.params import MiningParams
from stream_miner.engine.rules import RANK_MEASURES, RuleFilter


class UsageError(ValueError):
    """Options that do not fit together."""


def add_hygiene_options(group: argparse._ArgumentGroup) -> None:
    """Basket size cap options."""
    group.add_argument(
        "--max-basket-items",
        type=positive_int,
        default=DEFAULT_MAX_BASKET_ITEMS,
        help="baskets with more distinct items are skipped or truncated (default: "
        f"{DEFAULT_MAX_BASKET_ITEMS})",
    )
    group.add_argument(
        "--oversize",
        choices=[o.value for o in Oversize],
        default=Oversize.SKIP.value,
        help="what to do with oversized baskets (default: skip; both are counted)",
    )


def add_mining_options(parser: argparse.ArgumentParser) -> None:
    """Itemset and rule options."""
    thr = parser.add_argument_group("itemsets")
    support = thr.add_mutually_exclusive_group()
    support.add_argument(
        "--min-support",
        type=fraction,
        metavar="F",
        help="minimum support as a fraction of the window (default: 0.01)",
    )
    support.add_argument(
        "--min-count", type=positive_int, metavar="C", help="minimum support as a basket count"
    )
    thr.add_argument("--max-len", type=positive_int, metavar="L", help="longest itemset to report")
    thr.add_argument(
        "--include", action="append", metavar="ITEM", help="only these items may appear (repeatable)"
    )
    thr.add_argument(
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


def basket_policy(args: argparse.Namespace) -> BasketPolicy:
    """The basket policy the options ask for."""
    return BasketPolicy(args.max_basket_items, Oversize(args.oversize))


def mining_params(args: argparse.Namespace) -> MiningParams:
    """The mining parameters the options ask for."""
    rules = None
    if args.rules:
        rules = rule_filter(args)
    elif any(
        v is not None
        for v in (
            args.min_confidence,
            args.min_lift,
            args.max_antecedent,
            args.max_consequent,
            args.antecedent_item,
            args.consequent_item,
            args.max_rules,
            args.rank_by,
        )
    ):
        raise UsageError("rule options need --rules")
    min_support = args.min_support
    if min_support is None and args.min_count is None:
        min_support = Fraction(1, 100)
    return MiningParams(
        min_support=min_support,
        min_count=args.min_count,
        max_size=args.max_len,
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
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"{text!r} must be at least 1")
    return value


def fraction(text: str) -> Fraction:
    value = non_negative_fraction(text)
    if value > 1:
        raise argparse.ArgumentTypeError(f"{text!r} must lie between 0 and 1")
    return value


def non_negative_fraction(text: str) -> Fraction:
    try:
        value = Fraction(text.strip())
    except (ValueError, ZeroDivisionError):
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"{text!r} must not be negative")
    return value


_DURATION = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*(ms|s|m|h|d)?\s*$")
_UNIT_SECONDS = {"ms": 0.001, "s": 1.0, None: 1.0, "m": 60.0, "h": 3600.0, "d": 86400.0}


def duration(text: str) -> float:
    """Seconds from ``250ms``, ``30s``, ``5m``, ``2h``, ``1d`` or a plain number of seconds."""
    match = _DURATION.match(str(text))
    if not match:
        raise argparse.ArgumentTypeError(f"{text!r} is not a duration (e.g. 30s, 5m, 2h)")
    return float(match.group(1)) * _UNIT_SECONDS[match.group(2)]
