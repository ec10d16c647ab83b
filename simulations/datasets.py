"""Write a synthetic basket data set to a file (FIMI text or JSON Lines).

Example: python -m simulations.datasets quest --baskets 100000 --seed 0 --format fimi --out t.dat
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from collections.abc import Callable, Sequence

from simulations.heavy_tailed import heavy_tailed_baskets
from simulations.real_like import grocery_like_baskets, supermarket_like_baskets
from stream_miner.simulate.quest import quest_baskets

_GENERATORS: dict[str, Callable[..., list[list[int]]]] = {
    "quest": quest_baskets,
    "heavy": heavy_tailed_baskets,
    "grocery": grocery_like_baskets,
    "supermarket": supermarket_like_baskets,
}


def main(argv: Sequence[str] | None = None) -> int:
    """Generate the requested data set, write it and report a one-line summary on stderr."""
    parser = argparse.ArgumentParser(prog="python -m simulations.datasets", description=__doc__)
    parser.add_argument("generator", choices=sorted(_GENERATORS))
    parser.add_argument("--baskets", type=int, required=True, help="number of baskets")
    parser.add_argument("--seed", type=int, default=0)
    parser.add_argument("--format", choices=["fimi", "jsonl"], required=True)
    parser.add_argument("--out", required=True, help="output file path")
    parser.add_argument("--items-prefix", default="", help='item name prefix, e.g. "sku-"')
    parser.add_argument("--start-ts", type=float, help="jsonl: epoch seconds of the first basket")
    parser.add_argument("--rate", type=float, help="jsonl: baskets per second after --start-ts")
    args = parser.parse_args(argv)
    if args.baskets < 0:
        parser.error("--baskets must be >= 0")
    if any(ch.isspace() for ch in args.items_prefix):
        parser.error("--items-prefix must not contain whitespace")
    if (args.start_ts is None) != (args.rate is None):
        parser.error("--start-ts and --rate go together")
    if args.rate is not None and (args.format != "jsonl" or args.rate <= 0):
        parser.error("--start-ts/--rate need --format jsonl and a positive rate")

    started = time.perf_counter()
    baskets = _GENERATORS[args.generator](args.baskets, seed=args.seed)
    prefix = args.items_prefix
    with open(args.out, "w", encoding="utf-8") as out:
        for i, basket in enumerate(baskets):
            names = [f"{prefix}{item}" for item in basket]
            if args.format == "fimi":
                out.write(" ".join(names) + "\n")
                continue
            record: dict[str, object] = {"id": f"b{i + 1:06d}"}
            if args.start_ts is not None:
                record["ts"] = args.start_ts + i / args.rate
            record["items"] = names
            out.write(json.dumps(record) + "\n")
    n_items = sum(map(len, baskets))
    print(
        f"{args.generator}: wrote {len(baskets)} baskets ({n_items} items, "
        f"{len({i for b in baskets for i in b})} distinct) as {args.format} to {args.out} "
        f"in {time.perf_counter() - started:.1f} s",
        file=sys.stderr,
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
