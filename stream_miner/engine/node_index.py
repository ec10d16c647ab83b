"""Open-addressing hash index from node keys to node ids, with vectorised batch operations.

A node's key is ``(parent << 32) | item``. The table holds node ids; the keys themselves
live in the tree's key array, so a slot costs 4 bytes. Linear probing over a table of any
size (a multiplicative hash scaled to the size, so no power-of-two rounding); deletion leaves
a tombstone; the table is rebuilt when live entries plus tombstones pass 70 % of its size,
to 50 % load. All operations take whole numpy arrays, so a batch of lookups costs a few
numpy passes (one per probe step), not one Python step per key.
"""

from __future__ import annotations

import numpy as np

EMPTY = -1
TOMBSTONE = -2
_GOLDEN = np.uint64(0x9E3779B97F4A7C15)
_MAX_LOAD = 0.7
_TARGET_LOAD = 0.5
_MIN_SIZE = 64
_REBUILD_CHUNK = 1 << 16  # old slots re-placed per pass on rebuild, to bound temporary memory
_SCALAR_TAIL = 16  # probe the last few keys of a batch in Python, not numpy passes


class NodeIndex:
    """Maps keys to node ids; the owner passes its key array to every call."""

    __slots__ = ("_live", "_occupied", "_table")

    def __init__(self, capacity_hint: int = 1024) -> None:
        self._table = np.full(max(_MIN_SIZE, int(capacity_hint / _TARGET_LOAD)), EMPTY, np.int32)
        self._live = 0
        self._occupied = 0

    def __len__(self) -> int:
        return self._live

    @property
    def nbytes(self) -> int:
        """Memory held by the table."""
        return self._table.nbytes

    def _home(self, keys: np.ndarray) -> np.ndarray:
        high = (keys.astype(np.uint64) * _GOLDEN) >> np.uint64(32)
        return ((high * np.uint64(self._table.size)) >> np.uint64(32)).astype(np.int64)

    def _next(self, slots: np.ndarray) -> np.ndarray:
        slots += 1
        slots[slots == self._table.size] = 0
        return slots

    def find_slots(self, keys: np.ndarray, node_keys: np.ndarray) -> np.ndarray:
        """Slot of each key, or -1 where the key is absent."""
        result = np.full(keys.size, -1, dtype=np.int64)
        pending = np.arange(keys.size)
        slots = self._home(keys)
        table = self._table
        while pending.size > _SCALAR_TAIL:
            occupant = table[slots]
            live = occupant >= 0
            hit = np.zeros(pending.size, dtype=bool)
            hit[live] = node_keys[occupant[live]] == keys[pending[live]]
            result[pending[hit]] = slots[hit]
            again = ~hit & (occupant != EMPTY)
            pending = pending[again]
            slots = self._next(slots[again])
        size = table.size
        for position, key_slot in zip(pending.tolist(), slots.tolist(), strict=False):
            key = keys[position]
            occupant = table[key_slot]
            while occupant != EMPTY:
                if occupant >= 0 and node_keys[occupant] == key:
                    result[position] = key_slot
                    break
                key_slot = key_slot + 1 if key_slot + 1 < size else 0
                occupant = table[key_slot]
        return result

    def find(self, keys: np.ndarray, node_keys: np.ndarray) -> np.ndarray:
        """Node id of each key, or -1 where the key is absent."""
        slots = self.find_slots(keys, node_keys)
        found = slots >= 0
        nodes = np.full(keys.size, -1, dtype=np.int64)
        nodes[found] = self._table[slots[found]]
        return nodes

    def add(self, keys: np.ndarray, nodes: np.ndarray, node_keys: np.ndarray) -> None:
        """Add distinct keys that are not yet present, pointing at ``nodes``."""
        if self._occupied + keys.size > _MAX_LOAD * self._table.size:
            self._rebuild(self._live + keys.size, node_keys)
        self._place(keys, nodes)

    def remove(self, keys: np.ndarray, node_keys: np.ndarray) -> None:
        """Remove keys that are present (tombstones are left in their slots)."""
        slots = self.find_slots(keys, node_keys)
        if (slots < 0).any():
            raise KeyError("node index: removing a key that is not present")
        self._table[slots] = TOMBSTONE
        self._live -= keys.size

    def _place(self, keys: np.ndarray, nodes: np.ndarray) -> None:
        table = self._table
        pending = np.arange(keys.size)
        slots = self._home(keys)
        while pending.size > _SCALAR_TAIL:
            occupant = table[slots]
            free = np.flatnonzero(occupant < 0)
            free_slots = slots[free]
            candidates = nodes[pending[free]]
            self._occupied += int(np.count_nonzero(occupant[free] == EMPTY))
            table[free_slots] = candidates  # among keys aiming at one slot, one write wins
            won = table[free_slots] == candidates
            self._occupied -= int(np.count_nonzero(occupant[free][~won] == EMPTY))
            placed = np.zeros(pending.size, dtype=bool)
            placed[free[won]] = True
            pending = pending[~placed]
            slots = self._next(slots[~placed])
        size = table.size
        for key_slot, node in zip(slots.tolist(), nodes[pending].tolist(), strict=False):
            while table[key_slot] >= 0:
                key_slot = key_slot + 1 if key_slot + 1 < size else 0
            if table[key_slot] == EMPTY:
                self._occupied += 1
            table[key_slot] = node
        self._live += keys.size

    def _rebuild(self, expected: int, node_keys: np.ndarray) -> None:
        old = self._table
        self._table = np.full(max(_MIN_SIZE, int(expected / _TARGET_LOAD)), EMPTY, np.int32)
        self._live = 0
        self._occupied = 0
        for lo in range(0, old.size, _REBUILD_CHUNK):
            part = old[lo : lo + _REBUILD_CHUNK]
            nodes = part[part >= 0].astype(np.int64)
            self._place(node_keys[nodes], nodes)

    def node_ids(self) -> np.ndarray:
        """Every node id in the index (unordered)."""
        return self._table[self._table >= 0].astype(np.int64)
