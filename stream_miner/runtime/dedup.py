"""Duplicate suppression for at-least-once delivery: a basket id seen again is not counted twice.

Memory is bounded by what can still matter. With a count window, the ids of the last
``keep_last`` accepted baskets are kept. With a time window, an id is kept while its event
time is within ``horizon`` seconds (window length plus allowed lateness) of the newest event
time seen: an older duplicate would fall outside the window (or be refused as too late)
anyway. Each id may carry an origin tag (where its basket was read), so the ids of baskets a
handover gives back can be forgotten (:meth:`RecentIds.forget`): the member that reads them
again must not take them for duplicates.
"""

from __future__ import annotations

import heapq
import math
from collections import deque


class RecentIds:
    """Remembers recent basket ids.

    >>> ids = RecentIds(keep_last=2)
    >>> [ids.check_and_add(x) for x in ("a", "b", "a", "c", "a")]
    [False, False, True, False, False]
    """

    def __init__(self, *, keep_last: int | None = None, horizon: float | None = None) -> None:
        if (keep_last is None) == (horizon is None):
            raise ValueError("give exactly one of keep_last (count window) and horizon (time window)")
        if keep_last is not None and keep_last < 1:
            raise ValueError(f"keep_last must be at least 1, got {keep_last}")
        if horizon is not None and not horizon > 0:
            raise ValueError(f"horizon must be positive, got {horizon}")
        self.keep_last = keep_last
        self.horizon = horizon
        self._ids: set[str] = set()
        self._by_arrival: deque[str] = deque()
        self._by_time: list[tuple[float, str]] = []
        self._newest = -math.inf
        self._tags: dict[str, int] = {}
        self._by_tag: dict[int, str] = {}

    def __len__(self) -> int:
        return len(self._ids)

    def check_and_add(self, basket_id: str, ts: float | None = None, tag: int | None = None) -> bool:
        """True when ``basket_id`` is a duplicate of a remembered basket; else remember it
        (with its origin ``tag``, if given).

        With a time horizon, ``ts`` (event time in seconds) is required. Amortised O(log n).
        """
        if self.horizon is not None:
            if ts is None:
                raise ValueError("a time horizon needs the event time of every basket")
            self._newest = max(self._newest, ts)
            self._forget_older_than(self._newest - self.horizon)
        if basket_id in self._ids:
            return True
        self._ids.add(basket_id)
        if tag is not None:
            self._tags[basket_id] = tag
            self._by_tag[tag] = basket_id
        if self.horizon is None:
            self._by_arrival.append(basket_id)
            if len(self._by_arrival) > (self.keep_last or 0):
                self._drop(self._by_arrival.popleft())
        else:
            assert ts is not None
            heapq.heappush(self._by_time, (ts, basket_id))
        return False

    def _forget_older_than(self, cutoff: float) -> None:
        while self._by_time and self._by_time[0][0] < cutoff:
            self._drop(heapq.heappop(self._by_time)[1])

    def _drop(self, basket_id: str) -> None:
        self._ids.discard(basket_id)
        tag = self._tags.pop(basket_id, None)
        if tag is not None:
            self._by_tag.pop(tag, None)

    def id_at(self, tag: int) -> str | None:
        """The remembered id of the basket read at origin ``tag`` (None: unknown)."""
        return self._by_tag.get(tag)

    def forget(self, low: int, high: int) -> int:
        """Forget every id whose origin tag lies in [``low``, ``high``); return how many."""
        gone = {basket_id for basket_id, tag in self._tags.items() if low <= tag < high}
        if gone:
            self._ids -= gone
            for basket_id in gone:
                self._by_tag.pop(self._tags.pop(basket_id), None)
            self._by_arrival = deque(x for x in self._by_arrival if x not in gone)
            self._by_time = [entry for entry in self._by_time if entry[1] not in gone]
            heapq.heapify(self._by_time)
        return len(gone)

    def state(self) -> dict:
        """JSON-ready state, for checkpoints."""
        tags = {basket_id: tag for basket_id, tag in self._tags.items()}
        if self.horizon is None:
            return {"keep_last": self.keep_last, "ids": list(self._by_arrival), "tags": tags}
        newest = None if self._newest == -math.inf else self._newest
        return {
            "horizon": self.horizon,
            "newest": newest,
            "ids": [list(entry) for entry in sorted(self._by_time)],
            "tags": tags,
        }

    @classmethod
    def from_state(cls, state: dict) -> RecentIds:
        """Rebuild from :meth:`state` output."""
        tags = state.get("tags", {})
        if "keep_last" in state:
            restored = cls(keep_last=state["keep_last"])
            for basket_id in state["ids"]:
                restored.check_and_add(basket_id, tag=tags.get(basket_id))
            return restored
        restored = cls(horizon=state["horizon"])
        for ts, basket_id in state["ids"]:
            restored.check_and_add(basket_id, ts, tags.get(basket_id))
        if state["newest"] is not None:
            restored._newest = max(restored._newest, state["newest"])
        return restored
