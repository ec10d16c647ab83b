"""The scale-out benchmark (simulations/bench_scaleout.py) on a tiny input: one and two
members, every figure reported, no incomplete tick, and each tick's global count exact.
Speed is not asserted."""

from __future__ import annotations

import json

import pytest

pytestmark = pytest.mark.kafka


def test_one_and_two_members(capsys: pytest.CaptureFixture[str]) -> None:
    from simulations.bench_scaleout import main

    argv = ["--baskets", "3000", "--members", "1,2", "--window", "1000", "--tick", "500", "--timeout", "60"]
    assert main(argv) == 0
    captured = capsys.readouterr()
    report = json.loads(captured.out)
    assert set(report["members"]) == {"1", "2"}
    assert set(report["ratios_vs_k1"]["2"]) == {"baskets_per_s", "tick_latency_median", "bytes_per_tick"}
    for k, run in report["members"].items():
        # baskets at 250 .. 3249 s after a boundary: the last tick at 3000 counts (2000, 3000]
        assert run["exact"] == {
            "ticks_checked": run["ticks_closed"],
            "last_tick": "3000",
            "last_tick_n": 1000,
            "last_tick_expected_n": 1000,
            "wrong": {},
            "passed": True,
        }, k
        assert run["ticks_closed"] >= 2 and run["ticks_incomplete"] == 0 and run["incomplete"] == {}
        assert run["baskets_per_s"] > 0 and run["wall_s"] > run["first_part_s"] > 0
        assert 0 < run["tick_latency_s"]["median"] <= run["tick_latency_s"]["p90"]
        per_tick = run["per_tick"]
        assert per_tick["messages"]["part"] >= int(k) and per_tick["messages"]["close"] == 1
        assert per_tick["bytes_all"] > 0  # each figure is rounded on its own
        assert abs(per_tick["bytes_all"] - sum(per_tick["bytes"].values())) <= len(per_tick["bytes"])
        assert run["member_exit_codes"] == [0] * int(k)
    assert "members  baskets/s" in captured.err
