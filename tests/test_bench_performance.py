"""The rerunnable benchmark (simulations/bench_performance.py) in its --quick form: every
section is printed, and every ratio in the raw figures is a finite positive number. Speed is
not asserted; the benchmark itself checks that the competitors agree on the results."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest

from simulations.bench_performance import main

pytestmark = pytest.mark.slow

HEADINGS = {
    "mining": "1. Full mine in process",
    "ticks": "2. mine --tick-every, whole process",
    "kafka": "3. Kafka, one partition",
}


def ratios(figures: object) -> list[float]:
    """Every value in the figures whose key names a ratio (``a_over_b``, ``a_vs_b``)."""
    found: list[float] = []
    if isinstance(figures, dict):
        for key, value in figures.items():
            if isinstance(value, int | float) and ("_over_" in key or "_vs_" in key):
                found.append(float(value))
            else:
                found += ratios(value)
    return found


def run_quick(sections: list[str], tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> tuple[str, dict]:
    out = tmp_path / "figures.json"
    argv = ["--quick", "--repeats", "1", "--json", str(out)]
    for section in sections:
        argv += ["--only", section]
    assert main(argv) == 0
    return capsys.readouterr().out, json.loads(out.read_text())


def check(sections: list[str], printed: str, figures: dict, expected_ratios: int) -> None:
    assert printed.startswith("stream-miner performance | ")
    for section, heading in HEADINGS.items():
        assert (heading in printed) == (section in sections), heading
        assert (section in figures) == (section in sections), section
    found = ratios({s: figures[s] for s in sections})
    assert len(found) >= expected_ratios, found
    assert all(math.isfinite(r) and r > 0 for r in found), found


def test_mining_and_tick_sections(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    printed, figures = run_quick(["mining", "ticks"], tmp_path, capsys)
    # per data set: mine_tree, miner and rules over mining, mlxtend; default over forced modes
    # per data set; full mine and pyfim over the refresh per tick
    check(["mining", "ticks"], printed, figures, 4 * 4 + 4 + 2)
    names = {"quest", "heavy_big_baskets", "sparse_grocery_like", "dense_supermarket_like"}
    assert set(figures["mining"]) == set(figures["ticks"]["modes"]) == names
    assert all(row["itemsets"] > 0 for row in figures["mining"].values())


@pytest.mark.kafka
def test_kafka_section(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    printed, figures = run_quick(["kafka"], tmp_path, capsys)
    check(["kafka"], printed, figures, 3)
