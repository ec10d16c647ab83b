"""Start-up time of ``stream-miner --help`` and of ``mine`` on a 10-basket file, beside another
installation or source tree.

    python -m simulations.bench_startup --other-tree /path/to/old/checkout [--runs 21]
    python -m simulations.bench_startup --other /path/to/old-venv/bin/stream-miner

Every command runs alternately with its counterpart in one sitting (these machines are
noisy); prints one JSON object with the median and fastest wall time of each and the ratios.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

TEN_BASKETS = "tea jam\ntea scone\njam scone tea\nmilk\ntea\njam\nscone jam\ntea milk\njam tea\nscone\n"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    other = parser.add_mutually_exclusive_group(required=True)
    other.add_argument("--other", help="the other installation's stream-miner script")
    other.add_argument("--other-tree", help="a source tree run as python -m stream_miner (PYTHONPATH)")
    parser.add_argument("--this", default=shutil.which("stream-miner"), help="this installation's script")
    parser.add_argument("--runs", type=int, default=21)
    args = parser.parse_args()
    if args.other_tree:
        launchers = {
            "this": ([sys.executable, "-m", "stream_miner"], None),
            "other": ([sys.executable, "-m", "stream_miner"], os.environ | {"PYTHONPATH": args.other_tree}),
        }
    else:
        launchers = {"this": ([args.this], None), "other": ([args.other], None)}
    with tempfile.TemporaryDirectory() as directory:
        data = Path(directory) / "ten.dat"
        data.write_text(TEN_BASKETS)
        tasks = {"help": ["--help"], "mine": ["mine", str(data), "--min-count", "2"]}
        seconds: dict[str, list[float]] = {}
        for _ in range(args.runs):
            for task, arguments in tasks.items():
                for name, (launcher, env) in launchers.items():
                    started = time.perf_counter()
                    command = [*launcher, *arguments]
                    subprocess.run(command, check=True, capture_output=True, cwd=directory, env=env)
                    seconds.setdefault(f"{task}_{name}", []).append(time.perf_counter() - started)
    report: dict[str, object] = {
        key: {"median_s": round(statistics.median(s), 4), "fastest_s": round(min(s), 4)}
        for key, s in seconds.items()
    }
    for task in tasks:
        this, other = (statistics.median(seconds[f"{task}_{name}"]) for name in ("this", "other"))
        report[f"{task}_this_over_other"] = round(this / other, 3)
    print(json.dumps(report, indent=2))


if __name__ == "__main__":
    main()
