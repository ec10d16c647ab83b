"""The SON merge (Savasere, Omiecinski and Navathe, "An Efficient Algorithm for Mining
Association Rules in Large Databases", VLDB 1995), over members' windows instead of a
file's chunks.

Member i holds n_i baskets of the global window (N = sum of n_i) and mines them at its own
threshold ceil(s x n_i). An itemset frequent in the whole window has a count of at least
s x N = sum of s x n_i, so in some member its count reaches s x n_i, hence ceil(s x n_i):
the union of the locally frequent itemsets holds every globally frequent one (phase 1).
Each member then counts that union exactly in its own window (phase 2); the sums are the
exact global counts, and those at or above ceil(s x N) are the global result.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import replace

from stream_miner.engine.params import MiningParams
from stream_miner.engine.result import MiningResult
from stream_miner.engine.rules import generate_rules

Names = tuple[str, ...]


def local_params(params: MiningParams) -> MiningParams:
    """What a member mines in phase 1: the same itemsets, no rules (those come from the
    global counts). Support must be a fraction: a count threshold has no local share."""
    if params.min_support is None:
        raise ValueError("a run over several processes needs --min-support (a fraction), not --min-count")
    return replace(params, rules=None)


def candidates(parts: Iterable[Mapping[Names, int]]) -> list[Names]:
    """Phase 1: every itemset frequent in some member's window, sorted."""
    union: set[Names] = set()
    for part in parts:
        union.update(part)
    return sorted(union)


def totals(asked: Sequence[Names], answers: Iterable[Sequence[int]]) -> dict[Names, int]:
    """Phase 2: each asked itemset's count summed over the members (``answers`` holds each
    member's exact counts of ``asked``, in order)."""
    summed = dict.fromkeys(asked, 0)
    for counts in answers:
        for items, count in zip(asked, counts, strict=True):
            summed[items] += count
    return summed


def global_result(n_baskets: int, counts: Mapping[Names, int], params: MiningParams) -> MiningResult:
    """The window's result from exact global counts: the itemsets at or above the global
    threshold, and their rules."""
    min_count = params.threshold(n_baskets)
    itemsets = {items: count for items, count in counts.items() if count >= min_count}
    rules = [] if params.rules is None else generate_rules(itemsets, n_baskets, params.rules)
    return MiningResult(n_baskets=n_baskets, min_count=min_count, itemsets=itemsets, rules=rules)


def encode_itemsets(itemsets: Mapping[Names, int]) -> list[list]:
    """Itemsets with counts as JSON-ready rows: [[names...], count]."""
    return [[list(items), count] for items, count in itemsets.items()]


def decode_itemsets(rows: Iterable[Sequence]) -> dict[Names, int]:
    """The inverse of :func:`encode_itemsets`."""
    return {tuple(str(name) for name in items): int(count) for items, count in rows}
