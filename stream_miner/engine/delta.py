"""What changed between two consecutive results: itemsets and rules added, removed, changed."""

from __future__ import annotations

from dataclasses import dataclass

from stream_miner.engine.result import MiningResult
from stream_miner.engine.rules import Rule

Names = tuple[str, ...]
RuleKey = tuple[Names, Names]  # (antecedent, consequent), item names sorted


@dataclass(frozen=True)
class ResultDelta:
    """The difference from the previous tick's result to this one.

    Itemsets map to counts (``changed``: old and new count). Rules map to :class:`Rule`
    values, which carry counts and every measure (``changed``: old and new rule). A rule
    counts as changed when any of its counts or the window size changed.
    """

    added: dict[Names, int]
    removed: dict[Names, int]
    changed: dict[Names, tuple[int, int]]
    rules_added: dict[RuleKey, Rule]
    rules_removed: dict[RuleKey, Rule]
    rules_changed: dict[RuleKey, tuple[Rule, Rule]]


def diff_results(before: MiningResult | None, after: MiningResult) -> ResultDelta:
    """The delta from ``before`` (None: nothing yet) to ``after``. O(result size)."""
    old_sets = {} if before is None else before.itemsets
    new_sets = after.itemsets
    old_rules = {} if before is None else _rules_by_key(before)
    new_rules = _rules_by_key(after)
    return ResultDelta(
        added={k: v for k, v in new_sets.items() if k not in old_sets},
        removed={k: v for k, v in old_sets.items() if k not in new_sets},
        changed={k: (old_sets[k], v) for k, v in new_sets.items() if k in old_sets and old_sets[k] != v},
        rules_added={k: r for k, r in new_rules.items() if k not in old_rules},
        rules_removed={k: r for k, r in old_rules.items() if k not in new_rules},
        rules_changed={
            k: (old_rules[k], r)
            for k, r in new_rules.items()
            if k in old_rules and _counts(old_rules[k]) != _counts(r)
        },
    )


def _rules_by_key(result: MiningResult) -> dict[RuleKey, Rule]:
    return {(rule.antecedent, rule.consequent): rule for rule in result.rules}


def _counts(rule: Rule) -> tuple[int, int, int, int]:
    return rule.count, rule.antecedent_count, rule.consequent_count, rule.n_baskets
