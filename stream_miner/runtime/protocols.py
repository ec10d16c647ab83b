"""What the run loop needs from its parts: a source of records, a dead-letter sink, and
listeners told about every tick."""

from __future__ import annotations

from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Protocol

from stream_miner.decoding.records import DeadLetter, SourceRecord
from stream_miner.runtime.ledger import CommitOutcome

if TYPE_CHECKING:  # the engine and drift packages load only when a command mines
    from stream_miner.drift.events import DriftEvent, PatternStatus
    from stream_miner.engine.miner import Tick


class StoppedWaiting(Exception):
    """A stop was asked for while waiting for an outside system (a broker) to answer."""


class Handover(Protocol):
    """The loop's side of a consumer group's rebalances (set as ``Source.handover``)."""

    def before_revoke(self) -> dict[int, int]:
        """Partitions are about to move: save a checkpoint; return the next offsets it covers."""
        ...

    def after_commit(self, positions: dict[int, int], outcome: CommitOutcome) -> None:
        """What became of the commit of ``positions``."""

    def held_partitions(self) -> set[int]:
        """Partitions this member counted baskets of (the group's offsets are fetched for them)."""
        ...

    def on_assigned(self, committed: dict[int, int | None], assigned: set[int]) -> dict[int, int | None]:
        """After a rebalance: give back what the group's ``committed`` offsets show another
        member counts; return where to read each of the ``assigned`` partitions (None: where
        the consumer's reset policy says)."""
        ...


class SourceChanged(ValueError):
    """The source no longer holds what was read from it (a Kafka log lost, cut or recreated):
    reading on would silently skip or mix records. The message is one line naming what was
    found and the options to go on."""


class Source(Protocol):
    """Records from outside: a file, stdin or a Kafka topic."""

    name: str
    shares_partitions: bool
    """True when other readers may take partitions over (a consumer group): offsets commits
    then decide who counts what, and outputs wait until a commit covers them."""
    handover: Handover | None
    """Set by the loop before the first poll."""

    def seek(self, positions: dict[int, int], identity: dict[str, str]) -> dict[int, int]:
        """Resume at these next offsets per partition (from a checkpoint, made when the source
        had ``identity``); returns the offsets reading resumes at. Raises
        :class:`SourceChanged` when the source no longer holds them."""
        ...

    def identity(self) -> dict[str, str]:
        """What tells this source's data apart from a replacement under the same name (a
        Kafka topic's id); kept in checkpoints and handed back to :meth:`seek`."""
        ...

    def poll(self, max_records: int = 500) -> list[SourceRecord]:
        """The next records; none when nothing is there now."""
        ...

    def exhausted(self) -> bool:
        """True once a finite source has nothing more."""
        ...

    def while_busy(self, busy: Callable[[], bool]) -> None:
        """Return once ``busy()`` (which waits a little for a tick on a worker thread) says
        False; a source that must keep talking to a broker meanwhile does so between calls."""

    def position(self) -> str | None:
        """Where reading stands, for a person (share of a file read, lag behind a topic)."""
        ...

    def lag(self) -> dict[int, int]:
        """Messages behind the newest per assigned partition, as of the last fetch (a Kafka
        topic); empty for a file. Safe to call from any thread."""
        ...

    def commit(self, positions: dict[int, int]) -> tuple[dict[int, int], CommitOutcome]:
        """Record progress outside (a Kafka group's offsets) once a checkpoint covers it: the
        positions this reader may record (a group member: of the partitions it owns) and
        what became of that."""
        ...

    def has_progress(self) -> bool:
        """True when progress is on record outside any checkpoint (a group's committed offsets)."""
        ...

    def close(self) -> None:
        """Release the source."""


class DeadLetterSink(Protocol):
    """Where records that are not baskets go, counted by reason."""

    counts: Counter[str]

    def write(self, letter: DeadLetter) -> None:
        """Set ``letter`` aside."""

    def flush(self) -> None:
        """Make what was written durable."""

    def position(self) -> int | None:
        """Where the sink stands (a file's length), None for a sink that cannot be cut back."""
        ...

    def identity(self) -> str | None:
        """Which file the sink writes (None for one that cannot be cut back)."""
        ...

    def truncate(self, position: int | None, identity: str | None = None) -> None:
        """Cut the sink back to ``position`` (from :meth:`position`, measured on the file
        ``identity``: never another one), dropping what was written after it; nothing for a
        sink that cannot be cut back."""

    def close(self) -> None:
        """Release the sink."""


@dataclass(frozen=True)
class TickReport:
    """One tick as the run loop saw it: the tick, the stream so far, the time it took to
    update the window (apply buffered baskets) and to refresh the result, and what the drift
    detector found (when one runs)."""

    tick: Tick
    consumed: int
    last_id: str | None
    window_start: float | None
    window_end: float | None
    window_update_seconds: float
    refresh_seconds: float
    events: tuple[DriftEvent, ...] = ()  # drift events of this tick (with drift detection on)
    patterns: tuple[PatternStatus, ...] = ()  # tracked patterns after this tick, by support


class CannotCutBack:
    """For a sink that cannot be cut back on a restart (stdout, a topic, a counter): no
    position, no file identity, nothing to truncate."""

    def position(self) -> int | None:
        return None

    def identity(self) -> str | None:
        return None

    def truncate(self, position: int | None, identity: str | None = None) -> None:
        """Nothing can be cut back: nothing to do."""


class TickListener(Protocol):
    """Told about every tick, in order, on the run loop's thread."""

    def on_tick(self, report: TickReport) -> None:
        """Handle one tick (print it, write a snapshot, ...)."""
