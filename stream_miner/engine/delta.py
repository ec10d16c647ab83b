"""What changed between two consecutive results: itemsets and rules added, removed, changed."""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from itertools import repeat

import numpy as np

from stream_miner.engine.result import MiningResult
from stream_miner.engine.rule_set import RuleSet
from stream_miner.engine.rules import Rule

Names = tuple[str, ...]
RuleKey = tuple[Names, Names]  # (antecedent, consequent), item names sorted


@dataclass(frozen=True)
class ResultDelta:
    """The difference from the previous tick's result to this one.

    Itemsets map to counts (``changed``: old and new count). Rules map to :class:`Rule`
    values, which carry counts and every measure (``changed``: old and new rule). A rule
    counts as changed when any of its counts or the window size changed. The rule mappings
    are read-only views that build a ``Rule`` only when one is read.
    """

    added: dict[Names, int]
    removed: dict[Names, int]
    changed: dict[Names, tuple[int, int]]
    rules_added: Mapping[RuleKey, Rule]
    rules_removed: Mapping[RuleKey, Rule]
    rules_changed: Mapping[RuleKey, tuple[Rule, Rule]]


def diff_results(before: MiningResult | None, after: MiningResult) -> ResultDelta:
    """The delta from ``before`` (None: nothing yet) to ``after``. O(result size), with the
    rules matched as arrays (one dict lookup per itemset, none per rule)."""
    old_sets = {} if before is None else before.itemsets
    new_sets = after.itemsets
    new = RuleSet.of(after.rules, after.n_baskets)
    old = RuleSet.of([] if before is None else before.rules, 0 if before is None else before.n_baskets)
    old_at, new_at = _matches(old, new)
    same = (
        (old.counts[old_at] == new.counts[new_at])
        & (old.antecedent_counts[old_at] == new.antecedent_counts[new_at])
        & (old.consequent_counts[old_at] == new.consequent_counts[new_at])
    )
    changed = np.flatnonzero(~same) if old.n_baskets == new.n_baskets else np.arange(len(new_at))
    return ResultDelta(
        added={k: v for k, v in new_sets.items() if k not in old_sets},
        removed={k: v for k, v in old_sets.items() if k not in new_sets},
        changed={k: (old_sets[k], v) for k, v in new_sets.items() if k in old_sets and old_sets[k] != v},
        rules_added=RuleView(new, _others(len(new), new_at)),
        rules_removed=RuleView(old, _others(len(old), old_at)),
        rules_changed=ChangeView(old, old_at[changed], new, new_at[changed]),
    )


def _matches(old: RuleSet, new: RuleSet) -> tuple[np.ndarray, np.ndarray]:
    """Positions of the rules found in both (same sides), in ``new``'s order."""
    position = dict(zip(new.sides, range(len(new.sides)), strict=True))
    to_new = np.fromiter(map(position.get, old.sides, repeat(-1)), np.int64, len(old.sides))
    width = len(new.sides)
    new_keys = new.antecedent * width + new.consequent
    a, c = to_new[old.antecedent], to_new[old.consequent]
    old_keys = np.where((a >= 0) & (c >= 0), a * width + c, -1)
    by_key = np.argsort(old_keys, kind="stable")
    sorted_keys = old_keys[by_key]
    spot = np.minimum(np.searchsorted(sorted_keys, new_keys), max(len(sorted_keys) - 1, 0))
    found = sorted_keys[spot] == new_keys if len(sorted_keys) else np.zeros(len(new_keys), dtype=bool)
    new_at = np.flatnonzero(found)
    return by_key[spot[new_at]], new_at


def _others(size: int, matched: np.ndarray) -> np.ndarray:
    """Positions in ``range(size)`` not in ``matched``, in order."""
    keep = np.ones(size, dtype=bool)
    keep[matched] = False
    return np.flatnonzero(keep)


class RuleView(Mapping[RuleKey, Rule]):
    """The rules of ``rules`` at positions ``at`` (in that order), by their sides."""

    def __init__(self, rules: RuleSet, at: np.ndarray) -> None:
        self._rules, self._at = rules, at
        self._index: dict[RuleKey, int] | None = None

    def __len__(self) -> int:
        return len(self._at)

    def __iter__(self) -> Iterator[RuleKey]:
        rules = self._rules
        ante, cons = rules.antecedent[self._at].tolist(), rules.consequent[self._at].tolist()
        for a, c in zip(ante, cons, strict=True):
            yield rules.sides[a], rules.sides[c]

    def __getitem__(self, key: RuleKey) -> Rule:
        if self._index is None:
            self._index = dict(zip(self, self._at.tolist(), strict=True))
        return self._rules[self._index[key]]


class ChangeView(Mapping[RuleKey, tuple[Rule, Rule]]):
    """Old and new rule of the rules at ``old_at`` in ``old`` and ``new_at`` in ``new``, by their sides."""

    def __init__(self, old: RuleSet, old_at: np.ndarray, new: RuleSet, new_at: np.ndarray) -> None:
        self._old, self._new = RuleView(old, old_at), RuleView(new, new_at)

    def __len__(self) -> int:
        return len(self._new)

    def __iter__(self) -> Iterator[RuleKey]:
        return iter(self._new)

    def __getitem__(self, key: RuleKey) -> tuple[Rule, Rule]:
        return self._old[key], self._new[key]
