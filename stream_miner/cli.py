"""The ``stream-miner`` command line."""

from __future__ import annotations

import argparse
import sys
from collections import Counter
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from fractions import Fraction
from importlib import resources
from typing import BinaryIO, TextIO

from connectors.files import FORMATS, InputError, detect_format, read_records
from connectors.records import BadRecord
from stream_miner.engine import WindowMiner
from stream_miner.params import MiningParams
from stream_miner.result import MiningResult
from stream_miner.hygiene import DEFAULT_MAX_BASKET_ITEMS, BasketPolicy, Oversize, Verdict
from stream_miner.output import json_lines, write_table
from stream_miner.progress import Progress
from stream_miner.rules import RANK_MEASURES, RuleFilter
from stream_miner.window import CountWindow

EXIT_BAD_INPUT = 2
DEMO_FILE = "larkspur_market.jsonl"


class UsageError(ValueError):
    """Options that do not fit together."""


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``stream-miner`` console script; returns the exit code."""
    parser = _parser()
    args = parser.parse_args(argv)
    try:
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
    fmt.add_argument("--on-bad-input", choices=("fail", "skip"), default="fail",
                     help="stop at the first bad line (exit 2) or skip and count bad lines")
    fmt.add_argument("--max-basket-items", type=_positive_int, default=DEFAULT_MAX_BASKET_ITEMS,
                     help="baskets with more distinct items are skipped or truncated (default: "
                     f"{DEFAULT_MAX_BASKET_ITEMS})")
    fmt.add_argument("--oversize", choices=[o.value for o in Oversize], default=Oversize.SKIP.value,
                     help="what to do with oversized baskets (default: skip; both are counted)")
    win = mine.add_argument_group("window")
    win.add_argument("--window", type=_positive_int, metavar="N", help="mine the last N baskets (default: all)")
    win.add_argument("--every", type=_positive_int, metavar="K",
                     help="once the window is full, emit the result again after every K further baskets")
    win.add_argument("--full-remine", action="store_true",
                     help="with --every: mine the whole window at every tick instead of updating "
                     "the previous result (same output; for comparison)")
    thr = mine.add_argument_group("itemsets")
    support = thr.add_mutually_exclusive_group()
    support.add_argument("--min-support", type=_fraction, metavar="F",
                         help="minimum support as a fraction of the window (default: 0.01)")
    support.add_argument("--min-count", type=_positive_int, metavar="C", help="minimum support as a basket count")
    thr.add_argument("--max-len", type=_positive_int, metavar="L", help="longest itemset to report")
    thr.add_argument("--include", action="append", metavar="ITEM",
                     help="only these items may appear (repeatable)")
    thr.add_argument("--exclude", action="append", default=[], metavar="ITEM",
                     help="these items never appear (repeatable)")
    rules = mine.add_argument_group("rules")
    rules.add_argument("--rules", action="store_true", help="also derive association rules")
    rules.add_argument("--min-confidence", type=_fraction, metavar="F",
                       help="minimum confidence (default: 0.5)")
    rules.add_argument("--min-lift", type=_non_negative_fraction, metavar="X", help="minimum lift")
    rules.add_argument("--max-antecedent", type=_positive_int, metavar="N", help="most items on the left")
    rules.add_argument("--max-consequent", type=_positive_int, metavar="N", help="most items on the right")
    rules.add_argument("--antecedent-item", action="append", metavar="ITEM",
                       help="only these items may appear on the left (repeatable)")
    rules.add_argument("--consequent-item", action="append", metavar="ITEM",
                       help="only these items may appear on the right (repeatable)")
    rules.add_argument("--max-rules", type=_positive_int, metavar="N", help="keep only the N best rules")
    rules.add_argument("--rank-by", choices=RANK_MEASURES,
                       help="measure that picks the best rules for --max-rules (default: confidence)")
    out = mine.add_argument_group("output")
    out.add_argument("--json", action="store_true", help="JSON Lines instead of a table")
    return parser


def run_mine(args: argparse.Namespace) -> int:
    """The ``mine`` command."""
    if args.full_remine and args.every is None:
        raise UsageError("--full-remine needs --every")
    params = _mining_params(args)
    miner = WindowMiner(
        CountWindow(args.window) if args.window else None,
        BasketPolicy(args.max_basket_items, Oversize(args.oversize)),
    )
    bad: Counter[str] = Counter()
    out = sys.stdout
    with _open_input(args.input) as (stream, label):
        fmt = args.format or detect_format(label)
        progress = Progress(stream, label)
        records = read_records(stream, fmt, csv_id_column=args.csv_id_column,
                               csv_item_column=args.csv_item_column)
        ticks = _Ticker(args.window, args.every)
        try:
            for number, record in enumerate(records, start=1):
                progress.update(number)
                if isinstance(record, BadRecord):
                    if args.on_bad_input == "fail":
                        raise InputError(f"{label}: {record.message()} (use --on-bad-input skip to skip such lines)")
                    bad[record.reason] += 1
                    continue
                verdict = miner.add(record.items, record.ts)
                if verdict in (Verdict.ACCEPTED, Verdict.TRUNCATED) and ticks.accept():
                    _emit(miner, params, args, out, ticks.emitted())
            if ticks.owes_final():
                _emit(miner, params, args, out, ticks.emitted())
        finally:
            progress.close()
    _summarise(bad, miner.verdicts, sys.stderr)
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


def _emit(miner: WindowMiner, params: MiningParams, args: argparse.Namespace, out: TextIO,
          tick: int | None) -> None:
    if tick is None:
        result: MiningResult = miner.mine(params)
    else:
        result = miner.tick(params, full_remine=args.full_remine).result
    if args.json:
        lines = json_lines(result, tick)
        if lines:
            out.write("\n".join(lines) + "\n")
    else:
        write_table(result, out, show_rules=args.rules, tick=tick)
    out.flush()


def _mining_params(args: argparse.Namespace) -> MiningParams:
    rule_filter = None
    if args.rules:
        rule_filter = _rule_filter(args)
    elif any(v is not None for v in (args.min_confidence, args.min_lift, args.max_antecedent,
                                      args.max_consequent, args.antecedent_item,
                                      args.consequent_item, args.max_rules, args.rank_by)):
        raise UsageError("rule options need --rules")
    min_support = args.min_support
    if min_support is None and args.min_count is None:
        min_support = Fraction(1, 100)
    return MiningParams(
        min_support=min_support,
        min_count=args.min_count,
        max_len=args.max_len,
        include=None if args.include is None else frozenset(args.include),
        exclude=frozenset(args.exclude),
        rules=rule_filter,
    )


def _rule_filter(args: argparse.Namespace) -> RuleFilter:
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


@contextmanager
def _open_input(path: str | None) -> Iterator[tuple[BinaryIO, str]]:
    if path == "-":
        yield sys.stdin.buffer, "stdin"
    elif path is None:
        with resources.files("stream_miner.data").joinpath(DEMO_FILE).open("rb") as stream:
            yield stream, DEMO_FILE
    else:
        try:
            stream = open(path, "rb")
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


def _positive_int(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"{text!r} must be at least 1")
    return value


def _fraction(text: str) -> Fraction:
    value = _non_negative_fraction(text)
    if value > 1:
        raise argparse.ArgumentTypeError(f"{text!r} must lie between 0 and 1")
    return value


def _non_negative_fraction(text: str) -> Fraction:
    try:
        value = Fraction(text.strip())
    except (ValueError, ZeroDivisionError):
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"{text!r} must not be negative")
    return value


if __name__ == "__main__":
    sys.exit(main())
