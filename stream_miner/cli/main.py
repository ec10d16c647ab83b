"""The ``stream-miner`` entry point: the parser of every command and the exit codes."""

from __future__ import annotations

import argparse
import os
import sys
import threading
from collections.abc import Sequence

from stream_miner import __version__
from stream_miner.cli.backtest import add_backtest_parser
from stream_miner.cli.demo import add_demo_parser
from stream_miner.cli.mine import add_mine_parser
from stream_miner.cli.ops_kit import add_ops_kit_parser
from stream_miner.cli.run import add_run_parser, apply_config

EXIT_FAILURE, EXIT_USAGE = 1, 2


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``stream-miner`` console script; returns the exit code."""
    parser = build_parser()
    arguments = list(sys.argv[1:] if argv is None else argv)
    try:
        if arguments[:1] == ["run"]:
            apply_config(_subparser(parser, "run"), arguments[1:])
        args = parser.parse_args(arguments)
        return int(args.handler(args))
    except ValueError as error:  # UsageError, InputError, CheckpointError, ResultTooLarge, bad values
        print(f"stream-miner: error: {error}", file=sys.stderr)
        return EXIT_USAGE
    except OSError as error:  # a write failing during the run (disk full, file size limit)
        print(f"stream-miner: error: {error}", file=sys.stderr)
        return EXIT_FAILURE
    except BrokenPipeError:
        sys.stderr.close()  # the reader went away (e.g. `| head`): not an error
        return 0
    except KeyboardInterrupt:
        return 130


def entry() -> None:
    """The console script: :func:`main`, then exit. A tick abandoned on stop may still hold
    the interpreter in a long numpy call on its worker thread; the process then ends at once
    (output flushed) instead of waiting for it."""
    code = main()
    runner = sys.modules.get("stream_miner.runtime.runner")  # loaded only by commands that mine
    if runner is not None and any(
        thread.name == runner.TICK_THREAD and thread.is_alive() for thread in threading.enumerate()
    ):
        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(code)
    sys.exit(code)


def build_parser() -> argparse.ArgumentParser:
    """The ``stream-miner`` parser with its commands."""
    parser = argparse.ArgumentParser(
        prog="stream-miner",
        allow_abbrev=False,
        description="Exact sliding-window association-rule mining of shopping baskets.",
    )
    parser.add_argument("--version", action="version", version=f"%(prog)s {__version__}")
    commands = parser.add_subparsers(required=True, metavar="COMMAND")
    add_mine_parser(commands)
    add_run_parser(commands)
    add_backtest_parser(commands)
    add_ops_kit_parser(commands)
    add_demo_parser(commands)
    return parser


def _subparser(parser: argparse.ArgumentParser, name: str) -> argparse.ArgumentParser:
    action = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return action.choices[name]


if __name__ == "__main__":
    entry()
