"""`mine --every` picks per tick between tracking and full mines; `--full-remine` and
`--always-track` must print exactly the same."""

from __future__ import annotations

import json
import random

import pytest

from stream_miner.cli.main import main


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
    common = [
        str(data),
        "--window-size",
        "200",
        "--tick-every",
        "37",
        "--min-support",
        "0.05",
        "--rules",
        "--min-confidence",
        "0.3",
        "--json",
    ]
    incremental = run(capsys, "mine", *common)
    full = run(capsys, "mine", *common, "--full-remine")
    tracked = run(capsys, "mine", *common, "--always-track")
    assert incremental == full == tracked
    records = [json.loads(line) for line in incremental.splitlines()]
    ticks = sorted({r["tick"] for r in records})
    assert ticks == list(range(len(ticks))) and len(ticks) > 5
    emerging = [r["tick"] for r in records if r["type"] == "itemset" and r["items"] == ["item-12", "item-13"]]
    assert emerging and emerging[0] > 0  # found only once the pairing appears


@pytest.mark.parametrize("flag", ["--full-remine", "--always-track"])
def test_forced_modes_need_every(tmp_path, capsys, flag):
    data = tmp_path / "stream.dat"
    write_stream(data, n=20)
    assert main(["mine", str(data), flag]) == 2
    assert f"{flag} needs --tick-every" in capsys.readouterr().err


def test_forced_modes_exclude_each_other(tmp_path, capsys):
    data = tmp_path / "stream.dat"
    write_stream(data, n=20)
    with pytest.raises(SystemExit) as stopped:
        main(["mine", str(data), "--tick-every", "5", "--full-remine", "--always-track"])
    assert stopped.value.code == 2
    assert "not allowed with argument" in capsys.readouterr().err


def test_tick_timings_report_every_tick_of_every_mode(tmp_path, capsys):
    data = tmp_path / "stream.dat"
    write_stream(data)
    common = [
        str(data),
        "--window-size",
        "200",
        "--tick-every",
        "50",
        "--min-support",
        "0.05",
        "--json",
        "--tick-timings",
    ]
    for flag, mode in (([], "adaptive"), (["--full-remine"], "full"), (["--always-track"], "tracked")):
        assert main(["mine", *common, *flag]) == 0
        captured = capsys.readouterr()
        ticks = {json.loads(line)["tick"] for line in captured.out.splitlines()}
        line = next(x for x in captured.err.splitlines() if x.startswith("stream-miner: tick timings "))
        report = json.loads(line.removeprefix("stream-miner: tick timings "))
        assert report["mode"] == mode and report["ticks"] == len(ticks) == 600 // 50
        for spread in (report["refresh_ms"], report["window_update_ms"]):
            assert 0 <= spread["median"] <= spread["p90"] and spread["mean"] >= 0
    assert main(["mine", str(data), "--tick-timings"]) == 2
    assert "--tick-timings needs --tick-every" in capsys.readouterr().err
