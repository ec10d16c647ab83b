"""The drift detector on real baskets: shuffled (no change) and with two planted changes.

    python -m simulations.drift_on_real_data --arff supermarket.arff --work /tmp/real \\
        --new-pair brushware plasticware --fade-pair "small goods2" beef \\
        -- --window-size 925 --tick-every 92 --min-support 0.08 --min-confidence 0.5 --min-lift 1.5

Input: Weka's ``supermarket.arff`` (4,627 real checkouts of a New Zealand supermarket,
items aggregated to departments; shipped in Debian's ``weka`` package under
/usr/share/doc/weka/examples/, GPL-2 or later) or any JSON Lines file of baskets
(``--baskets``). Each seed shuffles the baskets (a stream with no real change: every event
is a false alarm) and writes a copy in which, from the middle on, both items of
``--new-pair`` join a ``--new-rate`` share of baskets and the second item of ``--fade-pair``
leaves a ``--fade-rate`` share of the baskets holding both. Both streams go through
``stream-miner run --events-out`` with the options after ``--``, once per ``--baseline``.
Prints every event with the baskets between the change and the window's newest basket.
"""

from __future__ import annotations

import argparse
import json
import random
import re
import shlex
import subprocess
import sys
from pathlib import Path


def read_arff(path: Path) -> list[list[str]]:
    """Baskets of a market-basket ARFF file: the attributes marked ``t`` in each row (a last
    nominal attribute that is not ``{ t}``, such as supermarket's ``total``, is left out)."""
    names: list[str] = []
    rows: list[list[str]] = []
    in_data = False
    for line in path.open(encoding="latin-1"):
        text = line.strip()
        if not text or text.startswith("%"):
            continue
        if in_data:
            rows.append(text.split(","))
        elif text.lower().startswith("@attribute"):
            found = re.match(r"@attribute\s+'([^']*)'\s+\{\s*t\s*\}", text, re.IGNORECASE)
            names.append(found.group(1) if found else "")
        elif text.lower().startswith("@data"):
            in_data = True
    return [[names[j] for j, v in enumerate(row) if v == "t" and names[j]] for row in rows]


def read_jsonl(path: Path) -> list[list[str]]:
    return [json.loads(line)["items"] for line in path.open()]


def write(baskets: list[list[str]], path: Path) -> None:
    """Basket i gets id ``s{i}`` (its place in the stream) and event time i seconds."""
    with path.open("w") as out:
        for i, items in enumerate(baskets):
            out.write(json.dumps({"id": f"s{i:06d}", "ts": 1_700_000_000 + i, "items": items}) + "\n")


def plant(
    baskets: list[list[str]], seed: int, new_pair: list[str], fade_pair: list[str], new_rate: float,
    fade_rate: float,
) -> tuple[list[list[str]], int, str]:  # fmt: skip
    """The planted copy, the basket number of the change, and how many baskets changed."""
    rng = random.Random(seed)
    half = len(baskets) // 2
    planted, joined, left = [], 0, 0
    for i, basket in enumerate(baskets):
        items = list(basket)
        if i >= half and rng.random() < new_rate:
            items += [item for item in new_pair if item not in items]
            joined += 1
        if i >= half and all(item in items for item in fade_pair) and rng.random() < fade_rate:
            items.remove(fade_pair[1])
            left += 1
        planted.append(items)
    return planted, half, f"new pair in {joined} baskets, {fade_pair[1]} out of {left}"


def run(source: Path, events: Path, options: list[str]) -> list[dict]:
    events.unlink(missing_ok=True)
    command = ["stream-miner", "run", "--source", f"file:{source}", *options]
    command += ["--events-out", str(events), "--quiet"]
    print("$", shlex.join(command))
    done = subprocess.run(command, capture_output=True, text=True, check=False)
    if done.returncode != 0:
        sys.exit(f"stream-miner run failed: {done.stderr.strip()}")
    return [json.loads(line) for line in events.open()] if events.exists() else []


def describe(event: dict, change: int | None) -> str:
    newest = int(event["window"]["last_id"][1:])
    delay = f", {newest - change + 1} baskets after the change" if change is not None else ""
    return (
        f"{event['event']:8}{' + '.join(event['items'])}  tick {event['tick']}{delay}, support "
        f"{event['support']:.3f} (baseline {event['baseline']['support']:.3f}), p {event['p_value']:.2g}"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawTextHelpFormatter)
    source = parser.add_mutually_exclusive_group(required=True)
    source.add_argument("--arff", type=Path, help="a market-basket ARFF file (Weka's supermarket.arff)")
    source.add_argument("--baskets", type=Path, help="a JSON Lines file of baskets")
    parser.add_argument("--work", type=Path, required=True, help="folder for the streams and events")
    parser.add_argument("--new-pair", nargs=2, required=True, metavar="ITEM")
    parser.add_argument("--fade-pair", nargs=2, required=True, metavar="ITEM")
    parser.add_argument("--new-rate", type=float, default=0.10)
    parser.add_argument("--fade-rate", type=float, default=0.85)
    parser.add_argument("--seeds", type=int, nargs="+", default=[1, 2, 3])
    parser.add_argument(
        "--baseline", nargs="+", default=["previous"], choices=["previous", "reference", "decayed"]
    )
    parser.add_argument("options", nargs=argparse.REMAINDER, help="after --: options of stream-miner run")
    args = parser.parse_args()
    options = [option for option in args.options if option != "--"]
    baskets = read_arff(args.arff) if args.arff else read_jsonl(args.baskets)
    args.work.mkdir(parents=True, exist_ok=True)
    for seed in args.seeds:
        shuffled = list(baskets)
        random.Random(seed).shuffle(shuffled)
        planted, change, changed = plant(
            shuffled, seed, args.new_pair, args.fade_pair, args.new_rate, args.fade_rate
        )
        write(shuffled, args.work / f"shuffled-{seed}.jsonl")
        write(planted, args.work / f"planted-{seed}.jsonl")
        for baseline in args.baseline:
            extra = [*options, "--baseline", baseline]
            for kind, at in (("shuffled", None), ("planted", change)):
                events = run(
                    args.work / f"{kind}-{seed}.jsonl",
                    args.work / f"events-{kind}-{seed}-{baseline}.jsonl",
                    extra,
                )
                note = f" (change at basket {change}: {changed})" if at is not None else ""
                print(f"seed {seed}, {kind}, baseline {baseline}: {len(events)} events{note}")
                for event in events:
                    print("   ", describe(event, at))


if __name__ == "__main__":
    main()
