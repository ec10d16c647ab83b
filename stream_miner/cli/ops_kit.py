"""The ``ops-kit`` command: writes the operations files shipped in the package (Prometheus
alerting rules and their unit tests, a Prometheus configuration, a Grafana dashboard)."""

from __future__ import annotations

import argparse
from importlib import resources
from pathlib import Path

from stream_miner.cli.options import UsageError
from stream_miner.cli.paths import check_directory

# file name -> what it is, in the order written
KIT = {
    "alerts.yml": "Prometheus alerting rules (rule_files)",
    "alerts_test.yml": "their unit tests (promtool test rules alerts_test.yml)",
    "scrape.yml": "a Prometheus configuration scraping run --metrics-port",
    "dashboard.json": "a Grafana dashboard (Dashboards > New > Import)",
}


def add_ops_kit_parser(commands: argparse._SubParsersAction) -> None:
    """Register ``ops-kit`` and its options."""
    kit = commands.add_parser(
        "ops-kit",
        allow_abbrev=False,
        help="write Prometheus alerting rules, their tests, a scrape configuration and a Grafana dashboard",
        description="Write the operations files for the metrics of `run --metrics-port` into DIR: "
        + "; ".join(f"{name}: {what}" for name, what in KIT.items())
        + ".",
    )
    kit.set_defaults(handler=run_ops_kit)
    kit.add_argument("--out", required=True, metavar="DIR", help="directory to write to (made if missing)")
    kit.add_argument("--force", action="store_true", help="replace files of the same names in DIR")


def run_ops_kit(args: argparse.Namespace) -> int:
    """Write every file of :data:`KIT` into ``args.out``; nothing is written when one exists
    already and ``--force`` is not given."""
    out = Path(args.out)
    check_directory(out, "--out")
    targets = {name: out / name for name in KIT}
    in_the_way = [name for name, path in targets.items() if path.is_dir()]
    if in_the_way:
        raise UsageError(f"--out {str(out)!r}: {', '.join(in_the_way)} is a directory there, not a file")
    existing = [name for name, path in targets.items() if path.exists()]
    if existing and not args.force:
        raise UsageError(
            f"--out {str(out)!r} already holds {', '.join(existing)}; give --force to replace them"
        )
    kit = resources.files("stream_miner.ops")
    for name, what in KIT.items():
        # a plain write, so the files get the umask's mode (a Prometheus server running as
        # another user must read them), not the owner-only mode of a temporary file
        targets[name].write_text(kit.joinpath(name).read_text(encoding="utf-8"), encoding="utf-8")
        print(f"wrote {targets[name]}: {what}")
    return 0
