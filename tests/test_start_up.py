"""Start-up loads only what a command uses: ``--help`` no numpy, ``mine`` no Kafka client,
numba, Prometheus client, drift detector or report page (checked in a fresh interpreter)."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

HEAVY = (
    "numpy",
    "numba",
    "kafka",
    "prometheus_client",
    "stream_miner.drift.detector",
    "stream_miner.engine.miner",
    "stream_miner.runtime.runner",
    "stream_miner.report.page",
    "stream_miner.engine.incremental.tracker",
)
PROBE = """
import contextlib, io, json, sys
from stream_miner.cli.main import main
with contextlib.redirect_stdout(io.StringIO()):
    try:
        main(sys.argv[1:])
    except SystemExit:
        pass
print(json.dumps([name for name in {heavy!r} if name in sys.modules]))
"""


def loaded_by(*argv: str) -> set[str]:
    done = subprocess.run(
        [sys.executable, "-c", PROBE.format(heavy=HEAVY), *argv], capture_output=True, text=True, check=True
    )
    return set(json.loads(done.stdout.splitlines()[-1]))


@pytest.mark.parametrize("argv", [["--help"], ["mine", "--help"], ["run", "--help"], ["backtest", "--help"]])
def test_help_loads_nothing_heavy(argv):
    assert loaded_by(*argv) == set()


def test_mine_on_a_small_file_loads_the_engine_only(tmp_path):
    data = tmp_path / "ten.dat"
    data.write_text("tea jam\ntea scone\njam scone tea\nmilk\n")
    assert loaded_by("mine", str(data), "--min-count", "2") == {
        "numpy",
        "stream_miner.engine.miner",
        "stream_miner.runtime.runner",
    }
