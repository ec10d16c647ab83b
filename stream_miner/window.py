"""Window store: the baskets currently in the window, kept compactly for exact expiry.

Baskets are stored in arrival order in numpy chunks (one chunk per applied batch): item ids
(in the tree's path order; 2 bytes each while ids fit, else 4), row offsets, tree handles
and event times (only when the baskets carry them). Expiry is exact and never needs the
tree: a count window drops the oldest baskets, a time window drops every basket whose event
time has fallen out, in or out of arrival order. About 2 bytes per item plus 9 bytes per
basket (17 with event times).
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class CountWindow:
    """The last ``size`` baskets."""

    size: int

    def __post_init__(self) -> None:
        if self.size < 1:
            raise ValueError(f"window size must be at least 1 basket, got {self.size}")


@dataclass(frozen=True)
class TimeWindow:
    """Baskets whose event time lies in (newest - seconds, newest]."""

    seconds: float

    def __post_init__(self) -> None:
        if not self.seconds > 0:
            raise ValueError(f"window duration must be positive, got {self.seconds}")


@dataclass
class _Chunk:
    items: np.ndarray  # uint16 or int32, all baskets' items back to back
    start: np.ndarray  # int32, len = baskets + 1
    handle: np.ndarray  # int32 tree handles
    event_ts: np.ndarray | None  # float64 event times, None when no basket has one
    alive: np.ndarray = field(init=False)
    n_alive: int = field(init=False)

    def __post_init__(self) -> None:
        self.alive = np.ones(self.handle.size, dtype=bool)
        self.n_alive = self.handle.size

    @property
    def ts(self) -> np.ndarray:
        """Event times (NaN where unknown)."""
        if self.event_ts is None:
            return np.full(self.handle.size, np.nan)
        return self.event_ts

    def kill(self, rows: np.ndarray) -> np.ndarray:
        """Mark rows expired; return their handles."""
        self.alive[rows] = False
        self.n_alive -= rows.size
        return self.handle[rows]

    @property
    def nbytes(self) -> int:
        ts_bytes = 0 if self.event_ts is None else self.event_ts.nbytes
        return self.items.nbytes + self.start.nbytes + self.handle.nbytes + ts_bytes + (
            self.alive.nbytes
        )


class WindowStore:
    """Baskets in the window, oldest first, with exact expiry by count or by event time."""

    def __init__(self) -> None:
        self._chunks: deque[_Chunk] = deque()
        self._head = 0  # rows of the oldest chunk already expired by count
        self._size = 0

    def __len__(self) -> int:
        return self._size

    def append(self, items: np.ndarray, start: np.ndarray, ts: np.ndarray, handles: np.ndarray) -> None:
        """Add a batch of baskets (CSR items in path order), newest last."""
        if ts.size == 0:
            return
        item_type = np.uint16 if items.size == 0 or items.max() < 1 << 16 else np.int32
        self._chunks.append(
            _Chunk(
                items=items.astype(item_type),
                start=(start - start[0]).astype(np.int32),
                handle=handles.astype(np.int32),
                event_ts=None if np.isnan(ts).all() else ts.astype(np.float64),
            )
        )
        self._size += ts.size

    def expire_oldest(self, n: int) -> np.ndarray:
        """Remove the ``n`` oldest live baskets; return their handles."""
        out = []
        while n > 0 and self._chunks:
            chunk = self._chunks[0]
            rows = np.flatnonzero(chunk.alive[self._head :])[:n] + self._head
            out.append(chunk.kill(rows).astype(np.int64))
            n -= rows.size
            self._size -= rows.size
            self._head = int(rows[-1]) + 1 if rows.size else self._head
            if chunk.n_alive == 0:
                self._chunks.popleft()
                self._head = 0
        return np.concatenate(out) if out else np.empty(0, dtype=np.int64)

    def expire_until(self, cutoff: float) -> np.ndarray:
        """Remove every basket with event time <= ``cutoff``; return their handles."""
        out = []
        for chunk in list(self._chunks):
            ts = chunk.ts
            if chunk.n_alive == 0 or not (chunk.alive & (ts <= cutoff)).any():
                continue
            rows = np.flatnonzero(chunk.alive & (ts <= cutoff))
            out.append(chunk.kill(rows).astype(np.int64))
            self._size -= rows.size
        while self._chunks and self._chunks[0].n_alive == 0:
            self._chunks.popleft()
            self._head = 0
        return np.concatenate(out) if out else np.empty(0, dtype=np.int64)

    def contents(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """All live baskets as (items, start, ts) in CSR form, oldest first."""
        items, lengths, ts = [], [], []
        for chunk in self._chunks:
            rows = np.flatnonzero(chunk.alive)
            row_len = (chunk.start[1:] - chunk.start[:-1])[rows]
            keep = np.repeat(chunk.alive, chunk.start[1:] - chunk.start[:-1])
            items.append(chunk.items[keep].astype(np.int64))
            lengths.append(row_len)
            ts.append(chunk.ts[rows])
        if not items:
            return np.empty(0, np.int64), np.zeros(1, np.int64), np.empty(0, np.float64)
        all_lengths = np.concatenate(lengths)
        start = np.zeros(all_lengths.size + 1, dtype=np.int64)
        np.cumsum(all_lengths, out=start[1:])
        return np.concatenate(items), start, np.concatenate(ts)

    def replace(self, items: np.ndarray, start: np.ndarray, ts: np.ndarray, handles: np.ndarray) -> None:
        """Replace the whole content (after the tree was rebuilt in a new item order)."""
        self._chunks.clear()
        self._head = 0
        self._size = 0
        self.append(items, start, ts, handles)

    @property
    def nbytes(self) -> int:
        """Memory held by the stored baskets."""
        return sum(chunk.nbytes for chunk in self._chunks)
