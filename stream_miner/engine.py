"""The window miner: basket hygiene, item vocabulary, window store and prefix tree together.

Baskets are buffered and applied to the tree in batches (the tree's batch update is
vectorised); every read (mining, size, checks) applies the buffer first, so results are
always those of the exact current window.
"""

from __future__ import annotations

import math
from collections import Counter
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np

from stream_miner.fpgrowth import mine_tree
from stream_miner.hygiene import BasketPolicy, Verdict
from stream_miner.rules import Rule, RuleFilter, generate_rules
from stream_miner.tree import PrefixTree, frequency_rank
from stream_miner.vocabulary import ItemVocabulary
from stream_miner.window import CountWindow, Expired, TimeWindow, WindowStore

DEFAULT_BATCH = 8192


@dataclass(frozen=True)
class MiningParams:
    """What to mine: a support threshold (fraction of the window, or absolute count),
    a maximum itemset length, item include/exclude lists, and optional rule filters."""

    min_support: Fraction | None = None
    min_count: int | None = None
    max_len: int | None = None
    include: frozenset[str] | None = None
    exclude: frozenset[str] = frozenset()
    rules: RuleFilter | None = None

    def __post_init__(self) -> None:
        if (self.min_support is None) == (self.min_count is None):
            raise ValueError("give exactly one of min_support (a fraction) and min_count")
        if self.min_support is not None and not 0 < self.min_support <= 1:
            raise ValueError(f"min support must lie in (0, 1], got {self.min_support}")
        if self.min_count is not None and self.min_count < 1:
            raise ValueError(f"min count must be at least 1, got {self.min_count}")
        if self.max_len is not None and self.max_len < 1:
            raise ValueError(f"max itemset length must be at least 1, got {self.max_len}")

    def threshold(self, n_baskets: int) -> int:
        """Absolute count threshold for a window of ``n_baskets``: ceil(fraction x N), >= 1."""
        if self.min_count is not None:
            return self.min_count
        assert self.min_support is not None
        return max(1, math.ceil(self.min_support * n_baskets))


@dataclass(frozen=True)
class MiningResult:
    """Frequent itemsets (item names, sorted) with counts, and rules, for one window."""

    n_baskets: int
    min_count: int
    itemsets: dict[tuple[str, ...], int]
    rules: list[Rule]
    names: Sequence[str] = field(repr=False)

    def rule_names(self, rule: Rule) -> tuple[tuple[str, ...], tuple[str, ...]]:
        """Antecedent and consequent of ``rule`` as sorted item names."""
        return (
            tuple(sorted(self.names[i] for i in rule.antecedent)),
            tuple(sorted(self.names[i] for i in rule.consequent)),
        )


class WindowMiner:
    """Keeps an exact sliding window of baskets in a prefix tree and mines it on demand.

    >>> miner = WindowMiner(CountWindow(3))
    >>> for basket in (["tea", "scone"], ["tea"], ["tea", "scone", "jam"], ["scone", "jam"]):
    ...     _ = miner.add(basket)
    >>> sorted(miner.mine(MiningParams(min_count=2)).itemsets.items())
    [(('jam',), 2), (('jam', 'scone'), 2), (('scone',), 2), (('tea',), 2)]
    """

    def __init__(
        self,
        window: CountWindow | TimeWindow | None = None,
        policy: BasketPolicy = BasketPolicy(),
        batch_size: int = DEFAULT_BATCH,
    ) -> None:
        if batch_size < 1:
            raise ValueError(f"batch size must be at least 1, got {batch_size}")
        self.window = window
        self.policy = policy
        self.batch_size = batch_size
        self.vocabulary = ItemVocabulary()
        self.tree = PrefixTree()
        self.store = WindowStore()
        self.verdicts: Counter[Verdict] = Counter()
        self._pending: list[list[int]] = []
        self._pending_ts: list[float] = []
        self._newest_ts = -math.inf
        self._ranked = False

    # ------------------------------------------------------------------ input
    def add(self, items: Iterable[str], ts: float | None = None) -> Verdict:
        """Offer one basket of item names (with an optional event time in seconds)."""
        if isinstance(self.window, TimeWindow) and ts is None:
            raise ValueError("a time window needs an event time for every basket")
        ids, verdict = self.policy.clean(self.vocabulary.encode(items))
        self.verdicts[verdict] += 1
        if verdict in (Verdict.SKIPPED_EMPTY, Verdict.SKIPPED_OVERSIZE):
            return verdict
        self._pending.append(ids)
        self._pending_ts.append(math.nan if ts is None else float(ts))
        if ts is not None and ts > self._newest_ts:
            self._newest_ts = float(ts)
        if len(self._pending) >= self.batch_size:
            self.flush()
        return verdict

    def flush(self) -> None:
        """Apply buffered baskets and expiries to the tree. O(batch) vectorised work."""
        pending, pending_ts = self._pending, np.array(self._pending_ts, dtype=np.float64)
        self._pending, self._pending_ts = [], []
        if isinstance(self.window, CountWindow):
            overflow = len(self.store) + len(pending) - self.window.size
            expired = self.store.expire_oldest(max(0, overflow))
            dropped = max(0, overflow - len(expired.handles))
            pending, pending_ts = pending[dropped:], pending_ts[dropped:]
        elif isinstance(self.window, TimeWindow):
            cutoff = self._newest_ts - self.window.seconds
            expired = self.store.expire_until(cutoff)
            keep = pending_ts > cutoff
            pending = [b for b, k in zip(pending, keep.tolist(), strict=True) if k]
            pending_ts = pending_ts[keep]
        else:
            expired = Expired.concat([])
        if not self._ranked and pending:
            self._rank_from(pending)
        paths = self.tree.paths_of(pending)
        handles = self.tree.update(paths, expired.handles)
        self.store.append(paths, pending_ts, handles)

    def _rank_from(self, baskets: list[list[int]]) -> None:
        """Fix the tree's item order from the first batch's item frequencies."""
        counts = np.bincount(np.concatenate([np.asarray(b) for b in baskets]), minlength=len(self.vocabulary))
        self.tree = PrefixTree(frequency_rank(counts))
        self._ranked = True

    def restructure(self) -> None:
        """Rebuild the tree in the window's current item-frequency order (results unchanged)."""
        self.flush()
        baskets, ts = self.store.contents()
        counts = np.bincount(baskets.items, minlength=len(self.vocabulary))
        self.tree = PrefixTree(frequency_rank(counts), capacity_hint=self.tree.node_count() + 16)
        paths = self.tree.order_paths(baskets)
        handles = self.tree.update(paths, ())
        self.store.replace(paths, ts, handles)

    # ------------------------------------------------------------------ reads
    def __len__(self) -> int:
        """Baskets in the window."""
        self.flush()
        return len(self.store)

    def mine(self, params: MiningParams) -> MiningResult:
        """Frequent itemsets (and rules if asked) of the current window, exactly."""
        self.flush()
        n = len(self.store)
        min_count = params.threshold(n)
        names = self.vocabulary.names()
        allowed = self._allowed_mask(params, names)
        found = mine_tree(self.tree.arrays(), min_count, max_len=params.max_len, allowed=allowed)
        rules = [] if params.rules is None else generate_rules(found, n, params.rules, names)
        itemsets = {tuple(sorted(names[i] for i in items)): c for items, c in found.items()}
        return MiningResult(n_baskets=n, min_count=min_count, itemsets=itemsets, rules=rules, names=names)

    @staticmethod
    def _allowed_mask(params: MiningParams, names: Sequence[str]) -> np.ndarray | None:
        if params.include is None and not params.exclude:
            return None
        allowed = np.array(
            [
                (params.include is None or name in params.include) and name not in params.exclude
                for name in names
            ],
            dtype=bool,
        )
        return allowed

    def check_invariants(self) -> None:
        """Raise AssertionError unless the tree holds exactly the stored window."""
        self.flush()
        self.tree.check_invariants()
        assert self.tree.n_baskets == len(self.store), "tree and window sizes differ"
