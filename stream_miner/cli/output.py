"""Writing mining results: JSON Lines for programs, a table for people."""

from __future__ import annotations

import json
import math
from typing import TextIO

from stream_miner.engine.result import MiningResult

RULE_COLUMN_LIMIT = 48  # longer rules push the measure columns to the right


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
    for rule in sorted(result.rules, key=lambda r: (r.antecedent, r.consequent)):
        conviction = None if math.isinf(rule.conviction) else rule.conviction
        record = {
            "type": "rule",
            "antecedent": list(rule.antecedent),
            "consequent": list(rule.consequent),
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
    """A readable summary: itemsets by basket count, rules by confidence then lift."""
    heading = f"window of {result.n_baskets:,} baskets; an itemset needs {result.min_count:,}"
    print(heading if tick is None else f"tick {tick}: {heading}", file=out)
    n = max(result.n_baskets, 1)
    itemsets = sorted(result.itemsets.items(), key=lambda kv: (-kv[1], len(kv[0]), kv[0]))
    print(f"\nfrequent itemsets: {len(itemsets)}", file=out)
    if itemsets:
        print(f"  {'baskets':>8}  {'support':>8}  itemset", file=out)
        for items, count in itemsets:
            print(f"  {count:>8}  {count / n:>8.4f}  {', '.join(items)}", file=out)
    if show_rules:
        rules = sorted(result.rules, key=lambda r: (-r.confidence, -r.lift, r.antecedent, r.consequent))
        texts = [f"{' + '.join(r.antecedent)} -> {' + '.join(r.consequent)}" for r in rules]
        width = min(RULE_COLUMN_LIMIT, max((len(t) for t in texts), default=4))
        print(f"\nrules: {len(rules)}", file=out)
        if rules:
            header = f"{'rule':<{width}}  {'baskets':>8}  {'confidence':>10}  {'lift':>7}  {'leverage':>9}"
            print(f"  {header}  {'conviction':>10}", file=out)
        for rule, text in zip(rules, texts, strict=True):
            conviction = "infinite" if math.isinf(rule.conviction) else f"{rule.conviction:.3f}"
            print(
                f"  {text:<{width}}  {rule.count:>8}  {rule.confidence:>10.3f}  {rule.lift:>7.3f}"
                f"  {rule.leverage:>9.4f}  {conviction:>10}",
                file=out,
            )
    print(file=out)
