"""The fault campaign (simulations/fault_campaign.py) in small: each scenario once, with a real
broker, ``stream-miner run`` members as separate processes and real signals, holding the run
to its promises: no basket lost or counted twice, every bad message written once as a dead
letter, no traceback, every fault followed by a recovery, SIGTERM obeyed within its bound.

Each scenario is seeded; its faults come at progress points (plus a seeded extra), never
after a fixed sleep; the only timed pauses are the producer's pace and the broker outages,
which are the scenarios themselves.
"""

from __future__ import annotations

import json
from dataclasses import asdict

import pytest

from simulations.fault_campaign import SCENARIOS
from simulations.fault_harness import Figures

pytestmark = [pytest.mark.kafka, pytest.mark.slow]

BASKETS = 1500
SEED = 7
STOP_BOUND = 10.0  # seconds from SIGTERM to exit: the documented default bound
STOP_SLACK = 5.0  # this 2-core machine runs other suites meanwhile: start-up and scheduling noise
FAULTS = {"kill-loop": 3, "group-churn": 5, "broker-pause": 2, "broker-restart": 2, "checkpoint-faults": 2}


def broken_promises(figures: Figures) -> list[str]:
    """The promises a scenario's figures break (each named with its figures)."""
    f = figures
    checks = {
        f"the topic held all {BASKETS} baskets, some re-sent, and bad messages": (
            f.produced == BASKETS and f.resent > 0 and f.bad_produced > 0
        ),
        f"no basket lost (lost {f.lost})": f.lost == 0,
        f"no basket counted twice (double {f.double_counted}, of which re-sent {f.double_counted_resent})": (
            f.double_counted == 0
        ),
        f"counts equal the reference's ({f.itemsets_differing} itemsets differ)": f.itemsets_differing == 0,
        f"every bad message written (missing {f.dead_letters_missing})": f.dead_letters_missing == 0,
        f"no bad message written twice (twice {f.dead_letters_twice})": f.dead_letters_twice == 0,
        f"nothing else written as a dead letter ({f.dead_letters_unexpected})": f.dead_letters_unexpected
        == 0,
        f"no traceback ({f.tracebacks})": f.tracebacks == 0,
        f"every fault injected and recovered from ({f.recoveries} of {f.faults})": (
            f.faults == FAULTS[f.scenario] and f.recoveries == f.faults
        ),
        f"SIGTERM obeyed within {STOP_BOUND} s + {STOP_SLACK} s ({f.stop_seconds})": (
            f.max_stop_seconds < STOP_BOUND + STOP_SLACK and f.unclean_stops == 0
        ),
    }
    if f.scenario == "checkpoint-faults":
        checks[f"each checkpoint fault reported in one line ({f.one_line_errors} lines)"] = (
            f.one_line_errors >= 2
        )
    return [promise for promise, kept in checks.items() if not kept]


@pytest.mark.parametrize("name", list(SCENARIOS))
def test_scenario_keeps_every_promise(name, tmp_path):
    if name == "broker-restart":
        pytest.importorskip(
            "moto", reason="a kept broker log needs moto's S3 server (pip install -e '.[test]')"
        )
    figures = SCENARIOS[name](BASKETS, SEED, tmp_path)
    broken = broken_promises(figures)
    assert not broken, "\n".join([*broken, json.dumps(asdict(figures))])
