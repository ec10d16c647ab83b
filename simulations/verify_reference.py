"""Acceptance check: `stream-miner mine --json` on a JSON Lines file equals mlxtend's
fpgrowth and association_rules on the file's last window of baskets.

Example:
    python -m simulations.datasets quest --baskets 20000 --seed 424242 --format jsonl \\
        --items-prefix sku- --out /tmp/held_out.jsonl
    python -m simulations.verify_reference /tmp/held_out.jsonl --window 3000 \\
        --min-support 0.02 --min-confidence 0.6
Prints one JSON object; exits 1 when anything differs.
"""

from __future__ import annotations

import argparse
import json
import math
import subprocess
import sys
from fractions import Fraction

import pandas as pd
from mlxtend.frequent_patterns import association_rules, fpgrowth
from mlxtend.preprocessing import TransactionEncoder

_MEASURES = ("support", "confidence", "lift", "leverage", "conviction")


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("path")
    parser.add_argument("--window", type=int, default=3000)
    parser.add_argument("--min-support", default="0.02")
    parser.add_argument("--min-confidence", default="0.6")
    args = parser.parse_args()
    command = [
        "stream-miner",
        "mine",
        args.path,
        "--format",
        "jsonl",
        "--window-size",
        str(args.window),
        "--min-support",
        args.min_support,
        "--rules",
        "--min-confidence",
        args.min_confidence,
        "--json",
    ]
    lines = subprocess.run(command, check=True, capture_output=True, text=True).stdout.splitlines()
    records = [json.loads(line) for line in lines]
    ours_sets = {tuple(r["items"]): r["count"] for r in records if r["type"] == "itemset"}
    ours_rules = {(tuple(r["antecedent"]), tuple(r["consequent"])): r for r in records if r["type"] == "rule"}

    with open(args.path, encoding="utf-8") as stream:
        baskets = [json.loads(line)["items"] for line in stream if line.strip()]
    last = baskets[-args.window :]
    min_count = math.ceil(Fraction(args.min_support) * len(last))
    encoder = TransactionEncoder()
    frame = pd.DataFrame(encoder.fit(last).transform(last), columns=encoder.columns_)
    found = fpgrowth(frame, min_support=(min_count - 0.5) / len(last), use_colnames=True)
    ref_sets = {
        tuple(sorted(s)): round(p * len(last)) for s, p in zip(found.itemsets, found.support, strict=False)
    }
    table = association_rules(
        found,
        num_itemsets=len(last),
        metric="confidence",
        min_threshold=float(Fraction(args.min_confidence)) - 1e-12,
    )
    ref_rules = {(tuple(sorted(r.antecedents)), tuple(sorted(r.consequents))): r for r in table.itertuples()}

    worst = 0.0
    for key, rule in ours_rules.items():
        if key not in ref_rules:
            continue
        for name in _MEASURES:
            mine, ref = rule[name], getattr(ref_rules[key], name)
            if mine is None and math.isinf(ref):
                continue
            worst = max(worst, abs(mine - ref) / max(1.0, abs(ref)))
    report = {
        "command": " ".join(command),
        "window": len(last),
        "min_count": min_count,
        "itemsets": len(ours_sets),
        "rules": len(ours_rules),
        "itemsets_equal": ours_sets == ref_sets,
        "rule_sets_equal": set(ours_rules) == set(ref_rules),
        "max_relative_measure_difference": worst,
    }
    print(json.dumps(report, indent=2))
    ok = report["itemsets_equal"] and report["rule_sets_equal"] and worst < 1e-9 and ours_sets
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
