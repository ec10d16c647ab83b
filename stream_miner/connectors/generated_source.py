"""Baskets made in this process (a simulation), served as a source: the run loop reads them
as it reads a file, at a steady pace if asked."""

from __future__ import annotations

from collections.abc import Callable, Iterable, Iterator

from stream_miner.decoding.records import Basket, SourceRecord
from stream_miner.runtime.ledger import CommitOutcome
from stream_miner.runtime.pace import Pace
from stream_miner.runtime.protocols import Handover


class GeneratedSource:
    """Serves ``baskets`` in order on partition 0 (offset = position in the stream), at most
    ``pace`` a second (None: as fast as they are taken). ``total`` (when the stream is
    finite and its length known) lets :meth:`position` say how far reading is."""

    def __init__(
        self, name: str, baskets: Iterable[Basket], *, pace: float | None = None, total: int | None = None
    ) -> None:
        self.name = name
        self.shares_partitions = False
        self.handover: Handover | None = None
        self._baskets: Iterator[Basket] = iter(baskets)
        self._pace = None if pace is None else Pace(pace)
        self._total = total
        self._held: Basket | None = None  # made but not yet due (pace)
        self._offset = 0
        self._resume_at = 0
        self._done = False

    def seek(self, positions: dict[int, int], identity: dict[str, str]) -> dict[int, int]:
        """Skip the baskets before the next offset of partition 0."""
        self._resume_at = positions.get(0, 0)
        return positions

    def identity(self) -> dict[str, str]:
        return {}

    def poll(self, max_records: int = 500) -> list[SourceRecord]:
        """Up to ``max_records`` baskets; fewer when the pace holds the next one back."""
        out: list[SourceRecord] = []
        while len(out) < max_records and not self._done:
            basket = self._held or next(self._baskets, None)
            self._held = None
            if basket is None:
                self._done = True
                break
            if self._offset < self._resume_at:
                self._offset += 1
                continue
            if self._pace is not None and not self._pace.due():
                self._held = basket
                break
            out.append(SourceRecord(basket, 0, self._offset))
            self._offset += 1
        return out

    def exhausted(self) -> bool:
        return self._done

    def while_busy(self, busy: Callable[[], bool]) -> None:
        while busy():
            pass

    def position(self) -> str | None:
        """The share of a stream of known length served so far."""
        if not self._total:
            return f"{self._offset:,} baskets served"
        return f"{min(1.0, self._offset / self._total):.0%} of {self.name}"

    def lag(self) -> dict[int, int]:
        return {}

    def commit(self, positions: dict[int, int]) -> tuple[dict[int, int], CommitOutcome]:
        """Nothing outside records progress."""
        return positions, CommitOutcome.ACKED

    def has_progress(self) -> bool:
        return False

    def close(self) -> None:
        """Nothing to release."""
