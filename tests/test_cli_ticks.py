"""`mine --every` runs the incremental miner; `--full-remine` must print exactly the same."""

from __future__ import annotations

import json
import random

from stream_miner.cli import main


def write_stream(path, n=600, seed=4):
    rnd = random.Random(seed)
    items = [f"item-{i}" for i in range(14)]
    lines = []
    for i in range(n):
        basket = set(rnd.sample(items[:6], rnd.randint(0, 3)) + rnd.sample(items, rnd.randint(1, 4)))
        if i > n // 2 and rnd.random() < 0.4:
            basket |= {"item-12", "item-13"}  # a pairing that emerges half way
        lines.append(" ".join(sorted(basket)))
    path.write_text("\n".join(lines) + "\n")


def run(capsys, *args):
    assert main(list(args)) == 0
    return capsys.readouterr().out


def test_incremental_and_full_remine_print_identical_ticks(tmp_path, capsys):
    data = tmp_path / "stream.dat"
    write_stream(data)
    common = [str(data), "--window", "200", "--every", "37", "--min-support", "0.05", "--rules",
              "--min-confidence", "0.3", "--json"]
    incremental = run(capsys, "mine", *common)
    full = run(capsys, "mine", *common, "--full-remine")
    assert incremental == full
    records = [json.loads(line) for line in incremental.splitlines()]
    ticks = sorted({r["tick"] for r in records})
    assert ticks == list(range(len(ticks))) and len(ticks) > 5
    emerging = [r["tick"] for r in records if r["type"] == "itemset" and r["items"] == ["item-12", "item-13"]]
    assert emerging and emerging[0] > 0  # found only once the pairing appears


def test_full_remine_needs_every(tmp_path, capsys):
    data = tmp_path / "stream.dat"
    write_stream(data, n=20)
    assert main(["mine", str(data), "--full-remine"]) == 2
    assert "--full-remine needs --every" in capsys.readouterr().err
