"""Window store: the baskets currently in the window, kept compactly for exact expiry.

Baskets are stored in arrival order in numpy chunks (one chunk per applied batch): item ids
(in the tree's path order; 2 bytes each while ids fit, else 4), row offsets, tree handles
event times and origin tags (each only when the baskets carry them). Expiry is exact and
never needs the tree: a count window drops the oldest baskets, a time window drops every
basket whose event time has fallen out, in or out of arrival order; baskets can also be
withdrawn by their origin tags (a range of tags, e.g. one partition's offsets from some
point on). About 2 bytes per item plus 9 bytes per basket (17 with event times, 8 more with
tags).
"""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from stream_miner.engine.arguments import whole_number
from stream_miner.engine.baskets import BasketArrays
from stream_miner.engine.incremental.kernels import rows_holding, run

MIN_CHUNK = 4096  # a newest chunk smaller than this (in baskets) takes the next batch in
CHUNKS = 8  # ... and so does one smaller than this fraction of the window
NO_TAG = -1  # the origin tag of a basket that has none


@dataclass(frozen=True)
class CountWindow:
    """The last ``size`` baskets."""

    size: int

    def __post_init__(self) -> None:
        object.__setattr__(self, "size", whole_number(self.size, "window size"))


@dataclass(frozen=True)
class TimeWindow:
    """Baskets whose event time lies in (newest - seconds, newest]."""

    seconds: float

    def __post_init__(self) -> None:
        seconds = self.seconds
        if isinstance(seconds, bool) or not isinstance(seconds, int | float) or not 0 < seconds < math.inf:
            raise ValueError(f"window duration must be a positive number of seconds, got {seconds!r}")
        object.__setattr__(self, "seconds", float(seconds))


@dataclass
class _Chunk:
    items: np.ndarray  # uint16 or int32, all baskets' items back to back
    start: np.ndarray  # int32, len = baskets + 1
    handle: np.ndarray  # int32 tree handles
    event_ts: np.ndarray | None  # float64 event times, None when no basket has one
    origin: np.ndarray | None  # int64 origin tags (-1: none), None when no basket has one
    alive: np.ndarray = field(init=False)
    n_alive: int = field(init=False)

    def __post_init__(self) -> None:
        self.alive = np.ones(self.handle.size, dtype=bool)
        self.n_alive = self.handle.size

    def compact(self) -> _Chunk:
        """The same chunk with items in 2 bytes while ids fit (else 4), offsets and handles in 4."""
        items = self.items
        item_type = np.uint16 if items.size == 0 or items.max() < 1 << 16 else np.int32
        chunk = _Chunk(
            items.astype(item_type),
            self.start.astype(np.int32),
            self.handle.astype(np.int32),
            self.event_ts,
            self.origin,
        )
        chunk.alive, chunk.n_alive = self.alive, self.n_alive
        return chunk

    def joined(self, newer: _Chunk) -> _Chunk:
        """This chunk with ``newer``'s baskets after its own (expired rows stay expired); both
        compact, so the join copies no wider arrays than it keeps."""
        ts = None if self.event_ts is None and newer.event_ts is None else np.concatenate([self.ts, newer.ts])
        origin = (
            None if self.origin is None and newer.origin is None else np.concatenate([self.tags, newer.tags])
        )
        chunk = _Chunk(
            np.concatenate([self.items, newer.items]),
            np.concatenate([self.start[:-1], newer.start + self.start[-1]]),
            np.concatenate([self.handle, newer.handle]),
            ts,
            origin,
        )
        chunk.alive = np.concatenate([self.alive, newer.alive])
        chunk.n_alive = self.n_alive + newer.n_alive
        return chunk

    @property
    def ts(self) -> np.ndarray:
        """Event times (NaN where unknown)."""
        if self.event_ts is None:
            return np.full(self.handle.size, np.nan)
        return self.event_ts

    @property
    def tags(self) -> np.ndarray:
        """Origin tags (-1 where none)."""
        if self.origin is None:
            return np.full(self.handle.size, NO_TAG, dtype=np.int64)
        return self.origin

    def baskets(self, rows: np.ndarray) -> BasketArrays:
        """The baskets at ``rows`` (increasing indices)."""
        whole = BasketArrays(self.items, self.start)
        return whole.select(rows)

    def kill(self, rows: np.ndarray) -> Expired:
        """Mark rows expired; return their handles and baskets."""
        self.alive[rows] = False
        self.n_alive -= rows.size
        return Expired(self.handle[rows].astype(np.int64), self.baskets(rows), self.ts[rows])

    @property
    def nbytes(self) -> int:
        extra = sum(a.nbytes for a in (self.event_ts, self.origin) if a is not None)
        return self.items.nbytes + self.start.nbytes + self.handle.nbytes + extra + self.alive.nbytes


@dataclass(frozen=True)
class Expired:
    """Baskets that left the window: their tree handles, their items and event times."""

    handles: np.ndarray
    baskets: BasketArrays
    ts: np.ndarray

    @classmethod
    def concat(cls, parts: list[Expired]) -> Expired:
        if not parts:
            return cls(np.empty(0, dtype=np.int64), BasketArrays.empty(), np.empty(0))
        return cls(
            np.concatenate([p.handles for p in parts]),
            BasketArrays.concat([p.baskets for p in parts]),
            np.concatenate([p.ts for p in parts]),
        )


class WindowStore:
    """Baskets in the window, oldest first, with exact expiry by count or by event time."""

    def __init__(self) -> None:
        self._chunks: deque[_Chunk] = deque()
        self._head = 0  # rows of the oldest chunk already expired by count
        self._size = 0

    def __len__(self) -> int:
        return self._size

    def append(self, paths: BasketArrays, ts: np.ndarray, handles: np.ndarray, tags: np.ndarray) -> None:
        """Add a batch of baskets (items in path order), newest last, with their event times
        (NaN: none) and origin tags (``NO_TAG``: none). A small newest chunk takes the batch
        in, so the window stays in a few chunks however small the batches."""
        if ts.size == 0:
            return
        chunk = _Chunk(
            items=paths.items,
            start=paths.start - paths.start[0],
            handle=handles,
            event_ts=None if np.isnan(ts).all() else ts.astype(np.float64),
            origin=None if (tags == NO_TAG).all() else tags.astype(np.int64),
        ).compact()
        if self._chunks and self._chunks[-1].handle.size < max(MIN_CHUNK, self._size // CHUNKS):
            chunk = self._chunks.pop().joined(chunk)
        self._chunks.append(chunk)
        self._size += ts.size

    def expire_oldest(self, n: int) -> Expired:
        """Remove the ``n`` oldest live baskets."""
        out = []
        while n > 0 and self._chunks:
            chunk = self._chunks[0]
            rows = np.flatnonzero(chunk.alive[self._head :])[:n] + self._head
            out.append(chunk.kill(rows))
            n -= rows.size
            self._size -= rows.size
            self._head = int(rows[-1]) + 1 if rows.size else self._head
            if chunk.n_alive == 0:
                self._chunks.popleft()
                self._head = 0
        return Expired.concat(out)

    def expire_until(self, cutoff: float) -> Expired:
        """Remove every basket with event time <= ``cutoff``."""
        return self._remove_where(lambda chunk: chunk.ts <= cutoff)

    def withdraw(self, low: int, high: int) -> Expired:
        """Remove every basket whose origin tag lies in [``low``, ``high``)."""
        return self._remove_where(lambda chunk: (chunk.tags >= low) & (chunk.tags < high))

    def _remove_where(self, chosen: Callable[[_Chunk], np.ndarray]) -> Expired:
        """Remove the live baskets of every chunk where ``chosen(chunk)`` (a row mask) is set."""
        out = []
        for chunk in self._chunks:
            due = chunk.alive & chosen(chunk)
            if due.any():
                rows = np.flatnonzero(due)
                out.append(chunk.kill(rows))
                self._size -= rows.size
        while self._chunks and self._chunks[0].n_alive == 0:
            self._chunks.popleft()
            self._head = 0
        return Expired.concat(out)

    def baskets_with(self, wanted: np.ndarray) -> BasketArrays:
        """Live baskets holding at least one item whose entry in the boolean ``wanted`` is set.

        O(items in the window), one pass (see :func:`~stream_miner.engine.incremental.kernels.run`).
        """
        parts = []
        for chunk in self._chunks:
            rows = run(rows_holding, chunk.items, chunk.start, chunk.alive, wanted)
            if rows.size:
                parts.append(chunk.baskets(rows))
        return BasketArrays.concat(parts)

    def oldest_tag(self) -> int | None:
        """The origin tag of the oldest live basket (None: empty, or it has no tag)."""
        for chunk in self._chunks:
            if chunk.n_alive:
                tag = int(chunk.tags[int(np.argmax(chunk.alive))])
                return None if tag < 0 else tag
        return None

    def lowest_tags(self, shift: int) -> dict[int, int]:
        """The lowest origin tag of the live baskets per group (``tag >> shift``; untagged
        baskets are left out)."""
        lowest: dict[int, int] = {}
        for chunk in self._chunks:
            tags = chunk.tags[chunk.alive]
            tags = tags[tags >= 0]
            groups = tags >> shift
            for group in np.unique(groups).tolist():
                low = int(tags[groups == group].min())
                lowest[group] = min(low, lowest.get(group, low))
        return lowest

    def contents(self) -> tuple[BasketArrays, np.ndarray, np.ndarray]:
        """All live baskets, their event times and their origin tags, oldest first."""
        parts, ts, tags = [], [], []
        for chunk in self._chunks:
            rows = np.flatnonzero(chunk.alive)
            parts.append(chunk.baskets(rows))
            ts.append(chunk.ts[rows])
            tags.append(chunk.tags[rows])
        if not parts:
            return BasketArrays.empty(), np.empty(0), np.empty(0, dtype=np.int64)
        return BasketArrays.concat(parts), np.concatenate(ts), np.concatenate(tags)

    def set_handles(self, handles: np.ndarray) -> None:
        """Give the live baskets, oldest first, new tree handles (after the tree was rebuilt
        in the same item order); nothing :meth:`contents` returns changes."""
        first = 0
        for chunk in self._chunks:
            rows = np.flatnonzero(chunk.alive)
            chunk.handle[rows] = handles[first : first + rows.size]
            first += rows.size

    def replace(self, paths: BasketArrays, ts: np.ndarray, handles: np.ndarray, tags: np.ndarray) -> None:
        """Replace the whole content (after the tree was rebuilt in a new item order)."""
        self._chunks.clear()
        self._head = 0
        self._size = 0
        self.append(paths, ts, handles, tags)

    @property
    def nbytes(self) -> int:
        """Memory held by the stored baskets."""
        return sum(chunk.nbytes for chunk in self._chunks)
