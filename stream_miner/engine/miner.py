"""The window miner: basket hygiene, item vocabulary, window store and prefix tree together.

Baskets are buffered and applied to the store and the tree in batches (the tree's batch
update is vectorised); every read (mining, size, checks) applies the buffer first, so results
are always those of the exact current window. While ticks are served by the tracked border,
nothing reads the tree, so it is left behind and rebuilt from the store when a full mine or
a check needs it (the lazy tree); its item order is kept up to date either way.
"""

from __future__ import annotations

import math
import numbers
import threading
import time
from collections import Counter
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from decimal import Decimal
from typing import TYPE_CHECKING

import numpy as np

from stream_miner.engine.baskets import BasketArrays
from stream_miner.engine.counting import count_itemsets
from stream_miner.engine.delta import ResultDelta, diff_results
from stream_miner.engine.fpgrowth import Itemset, check_size, mine_tree_named
from stream_miner.engine.hygiene import BasketPolicy, Verdict
from stream_miner.engine.limits import stop_if_set
from stream_miner.engine.params import MiningParams
from stream_miner.engine.past import PastBaskets, in_span
from stream_miner.engine.refresh import Refresh, RefreshChooser
from stream_miner.engine.result import MiningResult
from stream_miner.engine.rules import generate_rules
from stream_miner.engine.tree import PrefixTree, frequency_rank
from stream_miner.engine.vocabulary import ItemVocabulary
from stream_miner.engine.window import NO_TAG, CountWindow, Expired, TimeWindow, WindowStore

if TYPE_CHECKING:
    from stream_miner.engine.incremental.tracker import BorderTracker

DEFAULT_BATCH = 8192
ORDER_SAMPLE = 8192  # baskets used to test whether a new item order would pay off
ORDER_CHECK_MIN = 1000  # baskets applied between two such tests, at least
ORDER_GAIN = 0.02  # rebuild when the current order needs this much more nodes than a fresh one


@dataclass(frozen=True)
class MinerState:
    """Everything a :class:`WindowMiner` needs to carry on after a restart (for checkpoints):
    the window's baskets with their event times and origin tags, the not yet applied buffer
    (the same three), the vocabulary,
    the tree's item order, the counters, the next tick's number, the last tick's result
    (the next delta is taken against it; None before the first tick) and the past baskets
    kept for comparisons with their positions."""

    names: list[str]
    baskets: BasketArrays
    ts: np.ndarray
    tags: np.ndarray
    pending: BasketArrays
    pending_ts: np.ndarray
    pending_tags: np.ndarray
    newest_ts: float
    rank: np.ndarray
    ranked: bool
    applied_since_order: int
    verdicts: Counter[Verdict]
    next_tick: int
    last_result: MiningResult | None
    past: BasketArrays = field(default_factory=BasketArrays.empty)  # kept after they left (keep_past)
    past_positions: np.ndarray = field(default_factory=lambda: np.empty(0))
    left_total: int = 0
    keeping_past: bool = False


@dataclass(frozen=True)
class Tick:
    """One tick: its number (0, 1, ...), the full current result, and the change since the
    previous tick (everything counts as added on tick 0)."""

    number: int
    result: MiningResult
    delta: ResultDelta


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
        if window is not None and not isinstance(window, CountWindow | TimeWindow):
            raise ValueError(f"window must be a CountWindow, a TimeWindow or None, got {window!r}")
        self.window = window
        self.policy = policy
        self.batch_size = batch_size
        self.vocabulary = ItemVocabulary()
        self.tree = PrefixTree()
        self._tree_behind = False  # the tree does not hold the window (see _tree_up_to_date)
        self.store = WindowStore()
        self.verdicts: Counter[Verdict] = Counter()
        self._pending: list[list[int]] = []
        self._pending_ts: list[float] = []
        self._pending_tags: list[int] = []
        self._newest_ts = -math.inf
        self._ranked = False
        self._applied_since_order = 0
        self._tracker: BorderTracker | None = None
        self._tracker_key: tuple | None = None
        self._chooser = RefreshChooser()
        self._upkeep = 0.0  # seconds spent updating the tree since the last tick (for the chooser)
        self._changes: list[tuple[BasketArrays, int]] = []
        self._last: MiningResult | None = None
        self._ticks = 0
        self._named: dict[Itemset, tuple[str, ...]] = {}  # item names of recent results' itemsets
        self.left_total = 0  # count window: baskets that left it (the oldest one's number in it)
        self.past = PastBaskets()  # baskets that left, kept for comparisons (see keep_past)
        self._keeping_past = False
        self._dropped_unseen = 0

    # ------------------------------------------------------------------ state
    @property
    def next_tick(self) -> int:
        """The number the next tick will carry (ticks already done, across restarts)."""
        return self._ticks

    def state(self) -> MinerState:
        """The miner's state, read only: the buffer is kept as it is rather than applied, so
        taking the state changes nothing (not even the batch boundaries that decide the
        tree's item order)."""
        baskets, ts, tags = self.store.contents()
        past, past_positions = self.past.contents()
        return MinerState(
            names=self.vocabulary.names(),
            baskets=baskets,
            ts=ts,
            tags=tags,
            pending=BasketArrays.from_lists(self._pending),
            pending_ts=np.array(self._pending_ts, dtype=np.float64),
            pending_tags=np.array(self._pending_tags, dtype=np.int64),
            newest_ts=self._newest_ts,
            rank=self.tree.rank,
            ranked=self._ranked,
            applied_since_order=self._applied_since_order,
            verdicts=Counter(self.verdicts),
            next_tick=self._ticks,
            last_result=self._last,
            past=past,
            past_positions=past_positions,
            left_total=self.left_total,
            keeping_past=self._keeping_past,
        )

    @classmethod
    def restored(
        cls,
        state: MinerState,
        window: CountWindow | TimeWindow | None = None,
        policy: BasketPolicy = BasketPolicy(),
        batch_size: int = DEFAULT_BATCH,
    ) -> WindowMiner:
        """A miner holding ``state``: the window's baskets go straight into the tree and store
        (hygiene and expiry already ran on them); the buffer is applied by the next flush.
        Ticks carry on from ``state.next_tick``, the first delta against ``state.last_result``."""
        miner = cls(window, policy, batch_size)
        miner.vocabulary = ItemVocabulary(state.names)
        miner.verdicts = Counter(state.verdicts)
        miner._newest_ts = state.newest_ts
        miner._ranked = state.ranked
        if state.ranked:
            miner.tree = PrefixTree(state.rank, capacity_hint=state.baskets.items.size + 16)
            paths = miner.tree.order_paths(state.baskets)
            miner.store.append(paths, state.ts, miner.tree.update(paths, ()), state.tags)
        miner._applied_since_order = state.applied_since_order
        miner._pending = state.pending.to_lists()
        miner._pending_ts = state.pending_ts.tolist()
        miner._pending_tags = state.pending_tags.tolist()
        miner._ticks = state.next_tick
        miner._last = state.last_result
        miner.past = PastBaskets(state.past, state.past_positions)
        miner.left_total = state.left_total
        miner._keeping_past = state.keeping_past
        return miner

    # ------------------------------------------------------------------ input
    def add(self, items: Iterable[str], ts: float | None = None, tag: int | None = None) -> Verdict:
        """Offer one basket: item names (str), with an optional event time in seconds (a
        finite number) and an optional origin tag (a non-negative int, e.g. where the basket
        was read; see :meth:`withdraw`). A bad basket raises ValueError and changes nothing."""
        if tag is not None and (isinstance(tag, bool) or not isinstance(tag, int) or tag < 0):
            raise ValueError(f"an origin tag must be a non-negative int, got {tag!r}")
        if not isinstance(items, list | tuple):
            items = _as_basket(items)
        if ts is not None:
            ts = _event_time(ts)
        elif isinstance(self.window, TimeWindow):
            raise ValueError("a time window needs an event time for every basket")
        ids, verdict = self.policy.clean(self.vocabulary.encode(items))
        self.verdicts[verdict] += 1
        if verdict in (Verdict.SKIPPED_EMPTY, Verdict.SKIPPED_OVERSIZE):
            return verdict
        self._pending.append(ids)
        self._pending_ts.append(math.nan if ts is None else ts)
        self._pending_tags.append(NO_TAG if tag is None else tag)
        if ts is not None and ts > self._newest_ts:
            self._newest_ts = ts
        if len(self._pending) >= self.batch_size:
            self.flush()
        return verdict

    @property
    def newest_time(self) -> float:
        """The window's end in event time (-inf before any time is known)."""
        return self._newest_ts

    def advance_time(self, ts: float) -> None:
        """Move an event-time window's end to ``ts`` (if later) even before a basket that new
        arrives: the runtime's watermark. Baskets at or before ``ts - seconds`` expire."""
        self._newest_ts = max(self._newest_ts, _event_time(ts))

    def flush(self) -> None:
        """Apply buffered baskets and expiries to the tree. O(batch) vectorised work."""
        pending, pending_ts = self._pending, np.array(self._pending_ts, dtype=np.float64)
        pending_tags = np.array(self._pending_tags, dtype=np.int64)
        self._pending, self._pending_ts, self._pending_tags = [], [], []
        if isinstance(self.window, CountWindow):
            overflow = len(self.store) + len(pending) - self.window.size
            expired = self.store.expire_oldest(max(0, overflow))
            dropped = max(0, overflow - len(expired.handles))
            self._dropped_unseen = dropped
            pending, pending_ts, pending_tags = (
                pending[dropped:],
                pending_ts[dropped:],
                pending_tags[dropped:],
            )
        elif isinstance(self.window, TimeWindow):
            cutoff = self._newest_ts - self.window.seconds
            expired = self.store.expire_until(cutoff)
            keep = pending_ts > cutoff
            if self._keeping_past and not keep.all():  # arrived already out (a window rebuilt from its log)
                gone = [b for b, k in zip(pending, keep.tolist(), strict=True) if not k]
                self.past.append(BasketArrays.from_lists(gone), pending_ts[~keep])
            pending = [b for b, k in zip(pending, keep.tolist(), strict=True) if k]
            pending_ts, pending_tags = pending_ts[keep], pending_tags[keep]
        else:
            expired = Expired.concat([])
        self._remember_past(expired)
        if not self._ranked and pending:
            self._rank_from(pending)
        paths = self.tree.paths_of(pending)
        if self._tree_behind:
            handles = np.zeros(len(paths), dtype=np.int64)  # no node: rebuilt with the tree
        else:
            started = time.perf_counter()
            handles = self.tree.update(paths, expired.handles)
            self._upkeep += time.perf_counter() - started
        self.store.append(paths, pending_ts, handles, pending_tags)
        self._note_changes((expired.baskets, -1), (paths, 1))
        self._applied_since_order += len(paths)
        if self._applied_since_order >= max(len(self.store), ORDER_CHECK_MIN):
            self._reorder_if_stale()

    def _remember_past(self, expired: Expired) -> None:
        """Number the baskets that left (count window: in the order they left, then those of
        the buffer that never entered) and keep them when asked to (:meth:`keep_past`)."""
        count_window = isinstance(self.window, CountWindow)
        left = len(expired.handles)
        if self._keeping_past and left:
            if count_window:
                positions = np.arange(self.left_total, self.left_total + left, dtype=np.float64)
            else:
                positions = expired.ts
            self.past.append(expired.baskets, positions)
        if count_window:
            self.left_total += left + self._dropped_unseen
            self._dropped_unseen = 0

    def withdraw(self, low: int, high: int) -> int:
        """Take back every basket in the window whose origin tag lies in [``low``, ``high``),
        as if it had never been added (the next tick counts without them); return how many.
        Buffered baskets are applied first, so what they push out of a count window is not
        taken back; the freed places are filled by the next baskets added, not by baskets
        that expired earlier."""
        self.flush()
        withdrawn = self.store.withdraw(low, high)
        if len(withdrawn.handles):
            if not self._tree_behind:
                self.tree.update(BasketArrays.empty(), withdrawn.handles)
            self._note_changes((withdrawn.baskets, -1))
        return len(withdrawn.handles)

    def _note_changes(self, *changes: tuple[BasketArrays, int]) -> None:
        """Tell the tracker (if one runs) which baskets left (-1) or entered (+1) the window."""
        if self._tracker is not None:
            self._changes += changes
            if sum(len(baskets) for baskets, _ in self._changes) > 2 * max(len(self.store), 1):
                self._tracker, self._changes = None, []  # restarting from the window is cheaper
                self._chooser.turned_over()

    def _reorder_if_stale(self) -> None:
        """Once per window turnover: rebuild the tree in the current frequency order when a
        sample says that order would need at least ``ORDER_GAIN`` fewer nodes."""
        self._applied_since_order = 0
        baskets, ts, tags = self.store.contents()
        fresh = frequency_rank(np.bincount(baskets.items, minlength=len(self.vocabulary)))
        sample = baskets.select(np.arange(max(0, len(baskets) - ORDER_SAMPLE), len(baskets)))
        sample_lists = sample.to_lists()
        stale_nodes = PrefixTree.build(sample_lists, self.tree.rank).node_count()
        if stale_nodes > (1 + ORDER_GAIN) * PrefixTree.build(sample_lists, fresh).node_count():
            self._rebuild(baskets, ts, tags, fresh)

    def _rank_from(self, baskets: list[list[int]]) -> None:
        """Fix the tree's item order from the first batch's item frequencies."""
        counts = np.bincount(BasketArrays.from_lists(baskets).items, minlength=len(self.vocabulary))
        self.tree = PrefixTree(frequency_rank(counts))
        self._ranked = True

    def restructure(self) -> None:
        """Rebuild the tree in the window's current item-frequency order (results unchanged)."""
        self.flush()
        baskets, ts, tags = self.store.contents()
        rank = frequency_rank(np.bincount(baskets.items, minlength=len(self.vocabulary)))
        self._rebuild(baskets, ts, tags, rank)

    def _rebuild(self, baskets: BasketArrays, ts: np.ndarray, tags: np.ndarray, rank: np.ndarray) -> None:
        """Put the window in item order ``rank`` (a tree left behind stays behind, empty)."""
        self.tree = PrefixTree(rank, capacity_hint=16 if self._tree_behind else self.tree.node_count() + 16)
        paths = self.tree.order_paths(baskets)
        handles = np.zeros(len(paths), dtype=np.int64) if self._tree_behind else self.tree.update(paths, ())
        self.store.replace(paths, ts, handles, tags)
        self._applied_since_order = 0

    def _tree_up_to_date(self) -> PrefixTree:
        """The tree, rebuilt from the store (in the same item order) if it was left behind.
        Only the tree and the store's tree handles change, never what a checkpoint reads."""
        if self._tree_behind:
            baskets = self.store.contents()[0]  # already in the tree's path order
            tree = PrefixTree(self.tree.rank, capacity_hint=baskets.items.size + 16)
            self.store.set_handles(tree.update(baskets, ()))
            self.tree, self._tree_behind = tree, False
        return self.tree

    # ------------------------------------------------------------------ reads
    def __len__(self) -> int:
        """Baskets in the window."""
        self.flush()
        return len(self.store)

    def mine(self, params: MiningParams, *, interrupt: threading.Event | None = None) -> MiningResult:
        """Frequent itemsets (and rules if asked) of the current window: a full FP-growth mine.

        Raises ``ResultTooLarge`` (before listing) past ``params.max_itemsets`` or the rule
        filter's ``max_total``, and ``MiningInterrupted`` soon after ``interrupt`` is set.
        """
        self.flush()
        names = self.vocabulary.names()
        min_count = params.threshold(len(self.store))
        found = self._mine_tree(params, names, min_count, interrupt)
        return self._result(found, min_count, params, interrupt)

    def oldest_tag(self) -> int | None:
        """The origin tag of the oldest basket in the window (None: empty or untagged)."""
        self.flush()
        return self.store.oldest_tag()

    def lowest_tags(self, shift: int) -> dict[int, int]:
        """The lowest origin tag in the window per group of tags (``tag >> shift``)."""
        self.flush()
        return self.store.lowest_tags(shift)

    def count(self, itemsets: Sequence[Sequence[str]]) -> list[int]:
        """The exact number of baskets in the window holding each itemset (item names; an
        unknown name counts 0). One pass over the window's items, then set intersections."""
        self.flush()
        return count_itemsets(self.store.contents()[0], self._ids_of(itemsets))

    def count_past(self, itemsets: Sequence[Sequence[str]], low: float, high: float) -> list[int]:
        """Exact counts over every basket with position in [``low``, ``high``) for a count
        window (basket numbers; :attr:`left_total` is the oldest one's number in the window)
        or in (``low``, ``high``] for a time window (event times: a window ending at T holds
        the baskets of (T - length, T]): those kept after they left the window (see
        :meth:`keep_past`) and those still in it."""
        self.flush()
        ids = self._ids_of(itemsets)
        baskets, ts, _ = self.store.contents()
        if isinstance(self.window, CountWindow):
            positions = self.left_total + np.arange(len(baskets), dtype=np.float64)
        else:
            positions = ts
        timed = not isinstance(self.window, CountWindow)
        now = count_itemsets(baskets.select(np.flatnonzero(in_span(positions, low, high, timed))), ids)
        return [a + b for a, b in zip(now, self.past.count(ids, low, high, timed=timed), strict=True)]

    def keep_past(self, low: float, high: float) -> None:
        """Keep the baskets that left the window with a position :meth:`count_past` would
        count in a span from ``low`` to ``high``, and from now on every basket that leaves
        (until told otherwise)."""
        self.flush()
        self.past.keep(low, high, timed=not isinstance(self.window, CountWindow))
        self._keeping_past = True

    def stop_keeping_past(self) -> None:
        """Drop the kept past baskets and keep none from now on."""
        self.past = PastBaskets()
        self._keeping_past = False

    @property
    def keeping_past(self) -> bool:
        """Whether baskets that leave the window are kept (see :meth:`keep_past`)."""
        return self._keeping_past

    def _ids_of(self, itemsets: Sequence[Sequence[str]]) -> list[list[int | None]]:
        return [[self.vocabulary.lookup(name) for name in itemset] for itemset in itemsets]

    def _mine_tree(
        self, params: MiningParams, names: Sequence[str], min_count: int, interrupt: threading.Event | None
    ) -> dict[tuple[str, ...], int]:
        return mine_tree_named(
            self._tree_up_to_date().arrays(),
            min_count,
            names,
            max_size=params.max_size,
            allowed=self._allowed_mask(params, names),
            max_itemsets=params.max_itemsets,
            interrupt=interrupt,
        )

    def tick(
        self,
        params: MiningParams,
        *,
        refresh: Refresh = Refresh.ADAPTIVE,
        interrupt: threading.Event | None = None,
        defer: bool = False,
        last: bool = False,
    ) -> Tick:
        """The current result and what changed since the previous tick.

        ``refresh`` says how (the same result in every mode): ``TRACKED`` looks only at the
        baskets that entered or left the window since the previous tick (see
        :mod:`stream_miner.engine.incremental.tracker`; a tick whose item lists or size limit
        differ from the previous one starts the tracking from the window), ``FULL`` mines
        the whole window, ``ADAPTIVE`` picks per tick from measured costs (see
        :mod:`stream_miner.engine.refresh`) and never starts the tracking at a ``last`` tick
        (a run's stop), where the start would not pay off. Raises like :meth:`mine`; a tick
        that raised counts for nothing (the next tick has its number and its delta is against
        the last tick that returned).
        """
        self.flush()
        upkeep, self._upkeep = self._upkeep, 0.0
        names = self.vocabulary.names()
        n = len(self.store)
        min_count = params.threshold(n)
        if refresh == Refresh.ADAPTIVE:
            running = self._tracker is not None
            tracking = self._chooser.track(running) and (running or not last)
        else:
            tracking = refresh == Refresh.TRACKED
        found = None
        started = time.perf_counter()
        if tracking:
            starting = self._tracker is None
            tracked = self._track(params, names, min_count, interrupt)  # None: too many items to track
            if tracked is not None:
                found = self._name(tracked, names)
                self._tree_behind = True
                keep = self._chooser.tracked_tick(time.perf_counter() - started, starting)
                if refresh == Refresh.ADAPTIVE and not keep:
                    self._tracker, self._changes = None, []
        else:
            self._tracker, self._changes = None, []
        if found is None:
            self._tree_up_to_date()  # a rebuild after tracking is no cost of a full tick
            started = time.perf_counter()
            found = self._mine_tree(params, names, min_count, interrupt)
            self._chooser.full_mined(time.perf_counter() - started, upkeep)
        result = self._result(found, min_count, params, interrupt)
        tick = Tick(self._ticks, result, diff_results(self._last, result))
        stop_if_set(interrupt)  # an abandoned tick must not count: its caller has moved on
        if not defer:
            self.accept(tick)
        return tick

    def accept(self, tick: Tick) -> None:
        """Count ``tick`` (made with ``defer=True``: uncounted until then) as done: the next
        tick carries the next number and its delta is taken against this one. A caller that
        saves the miner from another thread accepts under its own lock, together with what
        it does with the tick."""
        self._last = tick.result
        self._ticks = tick.number + 1

    def _track(
        self, params: MiningParams, names: Sequence[str], min_count: int, interrupt: threading.Event | None
    ) -> dict[Itemset, int] | None:
        try:
            return self._update_tracker(params, names, min_count, interrupt)
        except BaseException:
            self._tracker, self._changes = None, []  # left half updated: start again next time
            raise

    def _update_tracker(
        self,
        params: MiningParams,
        names: Sequence[str],
        min_count: int,
        interrupt: threading.Event | None,
    ) -> dict[Itemset, int] | None:
        key = (params.max_size, params.include, params.exclude)
        if self._tracker is None or key != self._tracker_key:
            from stream_miner.engine.incremental.tracker import BorderTracker  # only ticks track

            self._tracker = BorderTracker(params.max_size)
            self._tracker_key = key
            self._changes = [(self.store.contents()[0], 1)]
        changed = BasketArrays.concat([baskets for baskets, _ in self._changes])
        signs = np.concatenate(
            [np.full(len(baskets), sign, dtype=np.int64) for baskets, sign in self._changes]
            or [np.empty(0, dtype=np.int64)]
        ).astype(np.int64)
        self._tracker.apply(changed, signs, interrupt)
        self._changes = []
        allowed = self._allowed_mask(params, names)
        allowed = np.ones(len(names), dtype=bool) if allowed is None else allowed
        if params.max_itemsets is not None and not self._tree_behind:  # else the tracker's own cap
            self._check_size(
                self._tracker.item_counts, min_count, allowed, params.max_size, params.max_itemsets
            )
        if not self._tracker.retarget(
            min_count, allowed, self.store.baskets_with, max_itemsets=params.max_itemsets, interrupt=interrupt
        ):
            return None
        return self._tracker.itemsets()

    def _check_size(
        self,
        item_counts: np.ndarray,
        min_count: int,
        allowed: np.ndarray,
        max_size: int | None,
        max_itemsets: int,
    ) -> None:
        """Refuse (``ResultTooLarge``) a tick whose result surely exceeds ``max_itemsets``,
        before the tracker builds any level; cheap at usual thresholds (few nodes reach them)."""
        counts = item_counts[: allowed.size]
        frequent = allowed.copy()
        frequent[: counts.size] &= counts >= min_count
        frequent[counts.size :] = False
        path_items = self.tree.most_flagged_path(min_count, frequent)
        check_size(int(frequent.sum()), path_items, max_size, max_itemsets)

    def _name(self, found: dict[Itemset, int], names: Sequence[str]) -> dict[tuple[str, ...], int]:
        """The tracker's itemsets of item ids as sorted tuples of names, through a cache of the
        recent ticks' names (a tracked tick mostly finds the itemsets of the previous one)."""
        if len(self._named) > 4 * len(found) + 4096:
            self._named = {}
        named = self._named
        for items in found.keys() - named.keys():
            named[items] = tuple(sorted(names[i] for i in items))
        return {named[items]: count for items, count in found.items()}

    def _result(
        self,
        itemsets: dict[tuple[str, ...], int],
        min_count: int,
        params: MiningParams,
        interrupt: threading.Event | None,
    ) -> MiningResult:
        n = len(self.store)
        rules = [] if params.rules is None else generate_rules(itemsets, n, params.rules, interrupt=interrupt)
        return MiningResult(n_baskets=n, min_count=min_count, itemsets=itemsets, rules=rules)

    @staticmethod
    def _allowed_mask(params: MiningParams, names: Sequence[str]) -> np.ndarray | None:
        if params.include is None and not params.exclude:
            return None
        return np.array([params.allows(name) for name in names], dtype=bool)

    def check_invariants(self) -> None:
        """Raise AssertionError unless the tree holds exactly the stored window."""
        self.flush()
        self._tree_up_to_date().check_invariants()
        assert self.tree.n_baskets == len(self.store), "tree and window sizes differ"


def _as_basket(items: object) -> list[str]:
    """A basket given as any iterable (not a string) as a list."""
    if isinstance(items, str | bytes | bytearray):
        raise ValueError("a basket is a list of item names, not a string")
    if not isinstance(items, Iterable):
        raise ValueError(f"a basket is a list of item names, not {type(items).__name__}")
    return list(items)


def _event_time(ts: object) -> float:
    """``ts`` as a float, refused unless a finite number (bools are not numbers here)."""
    if type(ts) is not float and (isinstance(ts, bool) or not isinstance(ts, numbers.Real | Decimal)):
        raise ValueError(
            f"an event time (ts) must be a finite number of seconds or None, not {type(ts).__name__}"
        )
    seconds = float(ts)
    if not math.isfinite(seconds):
        raise ValueError(f"an event time (ts) must be a finite number of seconds or None, got {seconds}")
    return seconds
