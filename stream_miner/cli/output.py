"""Writing mining results: JSON Lines for programs, a table for people."""

from __future__ import annotations

import json
import math
from typing import TextIO

from stream_miner.engine.result import MiningResult


def json_lines(result: MiningResult, tick: int | None = None) -> list[str]:
    """Itemset lines then rule lines, items sorted, in a deterministic order.

    Infinite conviction (confidence 1) is written as ``null``: JSON has no infinity.
    """
    extra = {} if tick is None else {"tick": tick}
    n = result.n_baskets
    lines = []
    for items, count in sorted(result.itemsets.items(), key=lambda kv: (len(kv[0]), kv[0])):
        record = {"type": "itemset", "items": list(items), "count": count, "support": count / n}
        lines.append(json.dumps(record | extra, ensure_ascii=False))
    named = sorted(((rule.antecedent, rule.consequent), rule) for rule in result.rules)
    for (antecedent, consequent), rule in named:
        conviction = None if math.isinf(rule.conviction) else rule.conviction
        record = {
            "type": "rule",
            "antecedent": list(antecedent),
            "consequent": list(consequent),
            "count": rule.count,
            "support": rule.support,
            "confidence": rule.confidence,
            "lift": rule.lift,
            "leverage": rule.leverage,
            "conviction": conviction,
        }
        lines.append(json.dumps(record | extra, ensure_ascii=False))
    return lines


def write_table(result: MiningResult, out: TextIO, *, show_rules: bool, tick: int | None = None) -> None:
    """A readable summary: itemsets by count, rules by confidence then lift."""
    heading = f"window: {result.n_baskets} baskets, min count {result.min_count}"
    if tick is not None:
        heading = f"tick {tick}  " + heading
    print(heading, file=out)
    n = max(result.n_baskets, 1)
    itemsets = sorted(result.itemsets.items(), key=lambda kv: (-kv[1], len(kv[0]), kv[0]))
    print(f"\n{len(itemsets)} frequent itemsets", file=out)
    if itemsets:
        print(f"{'count':>8} {'support':>8}  items", file=out)
        for items, count in itemsets:
            print(f"{count:>8} {count / n:>8.4f}  {', '.join(items)}", file=out)
    if show_rules:
        rules = sorted(result.rules, key=lambda r: (-r.confidence, -r.lift, (r.antecedent, r.consequent)))
        print(f"\n{len(rules)} rules", file=out)
        if rules:
            print(f"{'conf':>6} {'lift':>6} {'lever':>7} {'conv':>6} {'count':>7}  rule", file=out)
        for rule in rules:
            antecedent, consequent = rule.antecedent, rule.consequent
            conviction = "inf" if math.isinf(rule.conviction) else f"{rule.conviction:.2f}"
            print(
                f"{rule.confidence:>6.3f} {rule.lift:>6.2f} {rule.leverage:>7.4f} {conviction:>6}"
                f" {rule.count:>7}  {', '.join(antecedent)} => {', '.join(consequent)}",
                file=out,
            )
    print(file=out)
