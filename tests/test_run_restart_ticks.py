"""A restart goes on with the tick history: after SIGKILL between ticks and a restart with
the same command, the tick numbers and every tick's delta equal an uninterrupted run."""

from __future__ import annotations

import json
import random
import re

import pytest

from processes import stream_miner

TICK = re.compile(r"^stream-miner: (tick (\d+): .*); [0-9.]+ s$")


def write_stream(path, n, seed=11):
    """Checkouts whose pairings change over time, so most ticks add and remove itemsets."""
    rnd = random.Random(seed)
    goods = [f"g{i}" for i in range(16)]
    lines = []
    for i in range(n):
        phase = (i // 150) % 4
        basket = set(rnd.sample(goods[:6], rnd.randint(1, 3)))
        basket |= {goods[6 + 2 * phase], goods[7 + 2 * phase]} if rnd.random() < 0.5 else set()
        lines.append(json.dumps({"id": f"c{i}", "items": sorted(basket)}))
    path.write_text("\n".join(lines) + "\n")


def ticks_in(stderr: str) -> dict[int, str]:
    """Tick number -> the tick line without its duration (a later line for a number wins)."""
    found = {}
    for line in stderr.splitlines():
        match = TICK.match(line)
        if match:
            found[int(match.group(2))] = match.group(1)
    return found


@pytest.mark.slow
def test_sigkill_between_ticks_then_restart_continues_numbers_and_deltas(tmp_path, spawn):
    data = tmp_path / "in.jsonl"
    write_stream(data, 1500)
    common = ["run", "--source", f"file:{data}", "--window-size", "300", "--tick-every", "50"]
    common += ["--min-support", "0.05", "--rules", "--min-confidence", "0.4", "--checkpoint-interval", "0"]

    straight = spawn([*stream_miner(), *common, "--checkpoint-dir", str(tmp_path / "straight")])
    code, err = straight.finish()
    assert code == 0, err
    expected = ticks_in(err)
    assert sorted(expected) == list(range(30))

    state = str(tmp_path / "killed")
    victim = spawn([*stream_miner(), *common, "--checkpoint-dir", state, "--pace", "400"])
    victim.wait_for_line(r"^stream-miner: tick 11: ")
    victim.kill()
    before = ticks_in(victim.stderr)
    restarted = spawn([*stream_miner(), *common, "--checkpoint-dir", state])
    code, err = restarted.finish()
    assert code == 0, err
    assert "resumed from" in err
    after = ticks_in(err)
    assert min(after) >= 11 and min(after) <= max(before) + 1  # numbering goes on, no restart at 0
    assert before | after == expected  # same numbers, windows, counts and deltas
    # the first tick after the restart reports what changed, not the whole result as new
    first = min(after)
    assert after[first] == expected[first]
