"""Writing mining results: JSON Lines for programs, a table for people."""

from __future__ import annotations

import json
import math
from collections.abc import Callable
from typing import TYPE_CHECKING, TextIO

from stream_miner.engine.result import MiningResult

if TYPE_CHECKING:
    from stream_miner.engine.rule_set import RuleSet

RULE_COLUMN_LIMIT = 48  # longer rules push the measure columns to the right


def json_lines(result: MiningResult, tick: int | None = None) -> list[str]:
    """Itemset lines then rule lines, items sorted, in a deterministic order.

    Infinite conviction (confidence 1) is written as ``null``: JSON has no infinity.
    """
    n = result.n_baskets
    tail = "}" if tick is None else f', "tick": {tick}}}'
    name_json: dict[str, str] = {}
    lines = []
    for items, count in sorted(result.itemsets.items(), key=lambda kv: (len(kv[0]), kv[0])):
        texts = [name_json.get(name) or name_json.setdefault(name, _json_text(name)) for name in items]
        lines.append(
            f'{{"type": "itemset", "items": [{", ".join(texts)}], "count": {count}, '
            f'"support": {count / n!r}{tail}'
        )
    from stream_miner.engine.rule_set import RuleSet  # numpy: not loaded by --help

    rules = RuleSet.of(result.rules, n)
    order = rules.order()
    measures = [rules.measure(m)[order].tolist() for m in ("support", "confidence", "lift", "leverage")]
    convictions = ["null" if math.isinf(x) else repr(x) for x in rules.measure("conviction")[order].tolist()]
    ante, cons = rules.antecedent[order].tolist(), rules.consequent[order].tolist()
    side_json = _side_texts(rules, lambda side: json.dumps(list(side), ensure_ascii=False))
    for a, c, count, support, confidence, lift, leverage, conviction in zip(
        ante, cons, rules.counts[order].tolist(), *measures, convictions, strict=True
    ):
        lines.append(
            f'{{"type": "rule", "antecedent": {side_json[a]}, "consequent": {side_json[c]}, '
            f'"count": {count}, "support": {support!r}, "confidence": {confidence!r}, "lift": {lift!r}, '
            f'"leverage": {leverage!r}, "conviction": {conviction}{tail}'
        )
    return lines


def _json_text(name: str) -> str:
    return json.dumps(name, ensure_ascii=False)


def write_table(result: MiningResult, out: TextIO, *, show_rules: bool, tick: int | None = None) -> None:
    """A readable summary: itemsets by basket count, rules by confidence then lift (written at once)."""
    heading = f"window of {result.n_baskets:,} baskets; an itemset needs {result.min_count:,}"
    lines = [heading if tick is None else f"tick {tick}: {heading}"]
    n = max(result.n_baskets, 1)
    itemsets = sorted(result.itemsets.items(), key=lambda kv: (-kv[1], len(kv[0]), kv[0]))
    lines.append(f"\nfrequent itemsets: {len(itemsets)}")
    if itemsets:
        lines.append(f"  {'baskets':>8}  {'support':>8}  itemset")
        lines += [f"  {count:>8}  {count / n:>8.4f}  {', '.join(items)}" for items, count in itemsets]
    if show_rules:
        lines += _rule_table(result)
    out.write("\n".join(lines) + "\n\n")


def _rule_table(result: MiningResult) -> list[str]:
    """The lines of the rule table: rules by confidence, then lift, then item names."""
    from stream_miner.engine.rule_set import RuleSet  # numpy: not loaded by --help

    rules = RuleSet.of(result.rules, result.n_baskets)
    order = rules.order("confidence", "lift")
    side_text = _side_texts(rules, " + ".join)
    texts = [
        f"{side_text[a]} -> {side_text[c]}"
        for a, c in zip(rules.antecedent[order].tolist(), rules.consequent[order].tolist(), strict=True)
    ]
    width = min(RULE_COLUMN_LIMIT, max((len(t) for t in texts), default=4))
    lines = [f"\nrules: {len(rules)}"]
    if len(rules):
        header = f"{'rule':<{width}}  {'baskets':>8}  {'confidence':>10}  {'lift':>7}  {'leverage':>9}"
        lines.append(f"  {header}  {'conviction':>10}")
    columns = [rules.measure(m)[order].tolist() for m in ("confidence", "lift", "leverage", "conviction")]
    for text, count, confidence, lift, leverage, conviction in zip(
        texts, rules.counts[order].tolist(), *columns, strict=True
    ):
        shown = "infinite" if math.isinf(conviction) else f"{conviction:.3f}"
        lines.append(
            f"  {text:<{width}}  {count:>8}  {confidence:>10.3f}  {lift:>7.3f}  {leverage:>9.4f}  {shown:>10}"
        )
    return lines


def _side_texts(rules: RuleSet, text: Callable[[tuple[str, ...]], str]) -> dict[int, str]:
    """``text`` of every side the rules use, by side index: once per side, not per rule."""
    used = set(rules.antecedent.tolist()) | set(rules.consequent.tolist())
    return {i: text(rules.sides[i]) for i in used}
