"""Which baskets of each partition this member counted, and how much of that the group knows.

A consumer group hands a partition from one member to another at the offset the group has
committed. The committed offset is the single authority: whatever a member counted of a
partition at or beyond it when the partition leaves is counted again by the next owner, so
the member must give it back (withdraw it from its window). The ledger keeps, per partition:

- ``held``: the next offset after the last record taken;
- ``landed``: the offset of the member's last commit the broker acknowledged (or the offset
  it started reading at): everything below it is the member's for good;
- ``unsure``: a commit that was sent but whose outcome is unknown (a timeout, a crash before
  the answer was recorded);
- the counted baskets at or above ``landed``, in segments split at every commit sent, so the
  number given back at any commit boundary is exact.

:meth:`PartitionLedger.boundary` says where a partition's contribution must end once the
group's committed offset is known again (on every assignment): at ``landed``, or at the unsure
commit when the group's offset shows it landed.
"""

from __future__ import annotations

import bisect
from enum import Enum


class CommitOutcome(Enum):
    """What became of an offset commit."""

    ACKED = "acked"  # the broker recorded it
    REFUSED = "refused"  # the broker answered no (e.g. a rebalance in progress): not recorded
    UNKNOWN = "unknown"  # no answer (timeout, broker away): it may or may not be recorded


class PartitionLedger:
    """Per-partition accounting of counted baskets against the group's committed offsets."""

    def __init__(self) -> None:
        self.held: dict[int, int] = {}
        self.landed: dict[int, int] = {}
        self.unsure: dict[int, int] = {}
        self._segments: dict[int, list[list[int]]] = {}  # partition -> [[start offset, counted], ...]

    # ---------------------------------------------------------------- intake
    def took(self, partition: int, offset: int) -> None:
        """A record at ``offset`` was read (counted or not)."""
        self.held[partition] = max(self.held.get(partition, 0), offset + 1)

    def counted(self, partition: int, offset: int) -> None:
        """The basket read at ``offset`` entered the window (possibly after later ones, when
        an event-time window held it back)."""
        floor = self.landed.get(partition, 0)
        if offset < floor:
            return  # below what the group knows: never given back
        segments = self._segments.setdefault(partition, [])
        if segments and offset >= segments[-1][0] >= floor:  # in order: the last segment grows
            segments[-1][1] += 1
            return
        if not segments or offset < segments[0][0]:
            segments.insert(0, [offset, 0])
        starts = [start for start, _ in segments]
        at = bisect.bisect_right(starts, offset) - 1
        if segments[at][0] < floor:  # that segment began below what the group knows: split it there
            at += 1
            segments.insert(at, [floor, 0])
        segments[at][1] += 1

    # --------------------------------------------------------------- commits
    def sent(self, positions: dict[int, int]) -> None:
        """A commit of ``positions`` is about to be sent: split the segments there, so what
        lies beyond it can be given back on its own (every basket counted so far was read
        below its offset, so no count moves)."""
        for partition, offset in positions.items():
            segments = self._segments.setdefault(partition, [])
            if not any(start == offset for start, _ in segments):
                bisect.insort(segments, [offset, 0])

    def outcome(self, positions: dict[int, int], outcome: CommitOutcome) -> None:
        """Record what became of the commit of ``positions``."""
        for partition, offset in positions.items():
            if outcome is CommitOutcome.ACKED:
                self._land(partition, offset)
            elif outcome is CommitOutcome.UNKNOWN:
                self.unsure[partition] = max(offset, self.unsure.get(partition, offset))

    def _land(self, partition: int, offset: int) -> None:
        if offset < self.landed.get(partition, -1):
            return
        self.landed[partition] = offset
        if self.unsure.get(partition, offset + 1) <= offset:
            del self.unsure[partition]
        segments = self._segments.get(partition, [])
        while len(segments) > 1 and segments[1][0] <= offset:
            segments.pop(0)
        if segments and segments[0][0] < offset:
            segments[0][0] = offset

    # ---------------------------------------------------------- reconciling
    def boundary(self, partition: int, committed: int | None) -> int:
        """Where this member's contribution of ``partition`` must end, given the group's
        committed offset now (None: nothing committed): at the last acknowledged commit, or
        at the unsure one when the group's offset shows it landed. Never below the last
        acknowledged commit: what lies below it is this member's for good."""
        end = self.landed.get(partition, 0)
        unsure = self.unsure.get(partition)
        if unsure is not None and committed is not None and committed >= unsure:
            end = unsure  # the unsure commit is on record (or was overtaken after it landed)
        return end

    def give_back(self, partition: int, boundary: int) -> int:
        """Forget what was counted of ``partition`` at or beyond ``boundary``; return how many
        baskets that was. Afterwards the partition is known to the group up to ``boundary``."""
        segments = self._segments.get(partition, [])
        returned = sum(count for start, count in segments if start >= boundary)
        self._segments[partition] = [segment for segment in segments if segment[0] < boundary]
        if self.held.get(partition, 0) > boundary:
            self.held[partition] = boundary
        self.unsure.pop(partition, None)
        self.landed[partition] = boundary
        return returned

    def starts_at(self, partition: int, offset: int) -> None:
        """This member starts (or resumes) reading ``partition`` at ``offset``, the group's
        committed offset: everything below it is accounted for."""
        self.held[partition] = offset
        self.landed[partition] = offset
        self.unsure.pop(partition, None)
        self._segments[partition] = [
            segment for segment in self._segments.get(partition, []) if segment[0] < offset
        ]

    # ----------------------------------------------------------- persistence
    def state(self) -> dict:
        """JSON-ready state, for checkpoints."""
        return {
            "held": {str(p): o for p, o in self.held.items()},
            "landed": {str(p): o for p, o in self.landed.items()},
            "unsure": {str(p): o for p, o in self.unsure.items()},
            "segments": {str(p): s for p, s in self._segments.items() if s},
        }

    @classmethod
    def from_state(cls, state: dict) -> PartitionLedger:
        """Rebuild from :meth:`state` output."""
        ledger = cls()
        ledger.held = {int(p): int(o) for p, o in state["held"].items()}
        ledger.landed = {int(p): int(o) for p, o in state["landed"].items()}
        ledger.unsure = {int(p): int(o) for p, o in state["unsure"].items()}
        ledger._segments = {int(p): [[int(a), int(b)] for a, b in s] for p, s in state["segments"].items()}
        return ledger
