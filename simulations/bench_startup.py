"""Start-up time of ``stream-miner mine`` on a 10-basket file, beside another installation.

    python -m simulations.bench_startup --other /path/to/old-venv/bin/stream-miner [--runs 21]

Both commands run alternately in one sitting (these machines are noisy); prints one JSON
object with the median and fastest wall time of each and their ratio.
"""

from __future__ import annotations

import argparse
import json
import shutil
import statistics
import subprocess
import tempfile
import time
from pathlib import Path

TEN_BASKETS = "tea jam\ntea scone\njam scone tea\nmilk\ntea\njam\nscone jam\ntea milk\njam tea\nscone\n"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--other", required=True, help="the other installation's stream-miner script")
    parser.add_argument("--this", default=shutil.which("stream-miner"), help="this installation's script")
    parser.add_argument("--runs", type=int, default=21)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as directory:
        data = Path(directory) / "ten.dat"
        data.write_text(TEN_BASKETS)
        commands = {
            name: [script, "mine", str(data), "--min-count", "2"]
            for name, script in (("this", args.this), ("other", args.other))
        }
        seconds: dict[str, list[float]] = {name: [] for name in commands}
        for _ in range(args.runs):
            for name, command in commands.items():
                started = time.perf_counter()
                subprocess.run(command, check=True, capture_output=True, cwd=directory)
                seconds[name].append(time.perf_counter() - started)
    report = {
        name: {"median_s": round(statistics.median(s), 4), "fastest_s": round(min(s), 4)}
        for name, s in seconds.items()
    }
    report["this_over_other"] = round(report["this"]["median_s"] / report["other"]["median_s"], 3)
    print(json.dumps(report, indent=2))


if __name__ == "__main__":
    main()
