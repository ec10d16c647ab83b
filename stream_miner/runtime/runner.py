"""The run loop shared by ``mine`` and ``run``: source -> checks -> window -> ticks -> listeners.

Per record: a dead letter goes to the dead-letter sink; a basket seen before (same id,
within the window plus lateness) is counted and skipped; with an event-time window, a
basket later than the watermark allows (``ts <= newest - lateness - window``) is set aside
as ``too late`` (or dropped by option, always counted), a basket newer than the watermark
(``newest - lateness``) waits in a small buffer until the watermark passes it, and the
rest enter the window, where they land in the right place; a basket over the size cap is
set aside as ``basket too large``. Ticks follow :class:`~stream_miner.runtime.schedule.TickSchedule`
and are handed to every :class:`~stream_miner.runtime.protocols.TickListener`.
Checkpoints (every ``checkpoint_interval`` seconds, before partitions move, at the end and
on stop) hold the window, the tick history, the per-partition ledger, the duplicate memory,
the watermark buffer and the held-back dead letters; offsets are committed to the source only
after the checkpoint covering them is durable, and a note beside it records what became of
the commit.

Consumer groups: every basket carries its partition and offset as an origin tag. When a
rebalance shows (through the group's committed offsets) that another member reads from some
offset on what this member counted, those baskets are given back: withdrawn from the window
and the buffer, uncounted, their ids forgotten and their dead letters dropped (see
:mod:`stream_miner.runtime.ledger`). So each basket is counted by exactly one member.
"""

from __future__ import annotations

import heapq
import itertools
import json
import math
import sys
import threading
import time
from collections import Counter
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import TYPE_CHECKING, TextIO, TypeVar

from stream_miner.decoding.records import Basket, DeadLetter
from stream_miner.drift.settings import DriftSettings
from stream_miner.engine.hygiene import BasketPolicy, Verdict
from stream_miner.engine.limits import MiningInterrupted, ResultTooLarge
from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.refresh import Refresh
from stream_miner.engine.window import CountWindow, TimeWindow
from stream_miner.runtime.dedup import RecentIds
from stream_miner.runtime.event_outbox import EventOutbox, EventSink
from stream_miner.runtime.health import DeadLetterWatch, plural, summary
from stream_miner.runtime.ledger import CommitOutcome, PartitionLedger
from stream_miner.runtime.outbox import DeadLetterOutbox
from stream_miner.runtime.progress import ProgressLine
from stream_miner.runtime.protocols import (
    DeadLetterSink,
    Source,
    SourceChanged,
    TickListener,
    TickReport,
)
from stream_miner.runtime.schedule import TickSchedule

if TYPE_CHECKING:
    from stream_miner.drift.detector import DriftDetector

EXIT_OK, EXIT_USAGE = 0, 2
IDLE_WAIT = 0.05  # seconds to wait after a poll that returned nothing
BUSY_WAIT = 0.05  # seconds between looks at a running tick
ABANDON_AFTER = 0.2  # seconds a running tick gets to finish after a stop before it is abandoned
TICK_THREAD = "stream-miner-tick"  # the name of the worker thread a tick runs on
OFFSET_BITS = 40  # an origin tag is partition << OFFSET_BITS | offset
Done = TypeVar("Done")


def origin_tag(partition: int, offset: int) -> int:
    """The origin tag of the record at ``offset`` of ``partition``."""
    return (partition << OFFSET_BITS) | offset


def tags_from(partition: int, offset: int) -> tuple[int, int]:
    """The range of origin tags of ``partition`` from ``offset`` on: [low, high)."""
    return origin_tag(partition, offset), origin_tag(partition + 1, 0)


@dataclass(frozen=True)
class RunSettings:
    """How the loop windows, ticks, checkpoints and mines."""

    window: CountWindow | TimeWindow | None
    params: MiningParams
    policy: BasketPolicy = BasketPolicy()
    allowed_lateness: float = 0.0
    drop_late: bool = False
    tick_every: int | None = None
    tick_interval: float | None = None
    refresh: Refresh = Refresh.ADAPTIVE
    checkpoint_dir: Path | None = None
    checkpoint_interval: float = 30.0
    start_fresh: bool = False
    drift: DriftSettings | None = None  # None: no drift detection

    def __post_init__(self) -> None:
        TickSchedule(self.tick_every, self.tick_interval)  # validates the tick options
        if self.allowed_lateness < 0:
            raise ValueError("--allowed-lateness must not be negative")
        if self.allowed_lateness and not isinstance(self.window, TimeWindow):
            raise ValueError("--allowed-lateness needs an event-time window (--window-time)")


@dataclass(frozen=True)
class RunFigures:
    """The loop's counts at one moment, taken together (for metrics, read on another thread).
    ``consumed`` + ``given_back`` only grows, as does ``rejected`` + ``rejected_given_back``
    per reason; the other counts only grow. ``watermark`` (event-time windows) and
    ``checkpointed_at`` (wall clock of the last checkpoint written, across restarts) are None
    until known; ``lag`` is the source's lag per partition. ``aggregating`` and
    ``incomplete`` are a scale-out member's (None otherwise): whether it is the elected
    aggregator now, and the ticks it closed as incomplete."""

    consumed: int
    given_back: int
    duplicates: int
    dropped_late: int
    rejected: dict[str, int]
    rejected_given_back: dict[str, int]
    ticks: int
    emerged: int
    faded: int
    watermark: float | None
    checkpointed_at: float | None
    lag: dict[int, int]
    aggregating: bool | None = None
    incomplete: int = 0


class Runner:
    """Runs one source through the window until it ends or :meth:`stop` is called."""

    def __init__(
        self,
        settings: RunSettings,
        source: Source,
        dead_letters: DeadLetterSink,
        listeners: Sequence[TickListener] = (),
        log: TextIO | None = None,
        *,
        events: EventSink | None = None,
        talk_when_clean: bool = True,
        tick_on_stop: bool = True,
        silent_ticks: bool = False,
    ) -> None:
        self.settings = settings
        self.source = source
        self.dead_letters = DeadLetterOutbox(dead_letters, hold=settings.checkpoint_dir is not None)
        self.listeners = list(listeners)
        self.detector: DriftDetector | None = None
        if settings.drift is not None:
            from stream_miner.drift.detector import DriftDetector  # only with drift detection

            self.detector = DriftDetector(settings.drift)
        held = settings.checkpoint_dir is not None
        self.events = None if events is None else EventOutbox(events, hold=held)
        self.log = log or sys.stderr
        self.talk_when_clean = talk_when_clean  # False: say nothing unless something was set aside
        self.tick_on_stop = tick_on_stop  # False: a stop skips the last tick (mine: no partial result)
        self.silent_ticks = silent_ticks  # True: listeners print nothing, the progress line stays up
        self.progress = ProgressLine(self.log)
        self.stopping = False
        self.interrupt = threading.Event()  # set to make a mine give up (see ABANDON_AFTER)
        self.counts: Counter[str] = Counter()
        self.miner = WindowMiner(settings.window, settings.policy)
        self.ledger = PartitionLedger()
        self.sequence = 0  # checkpoints saved, across restarts
        self._withdrawals: list[tuple[int, int]] = []  # (partition, offset): given back, not yet withdrawn
        self.source_identity: dict[str, str] = {}  # the source's identity when the checkpoint was made
        self._resume_at: dict[int, int] = {}  # partitions of a lost or cut log, accepted: read from here
        self.consumed = 0
        self.checkpointed_at: float | None = None  # wall clock of the last checkpoint written
        self.last_id: str | None = None
        self.newest = -math.inf
        self.watermark = -math.inf  # where an event-time window ends: newest - lateness, or newest at the end
        self.earliest = math.inf  # the oldest event time that entered the window (when it first filled)
        self.waiting: list[tuple[float, int, Basket, int, int]] = []  # heap by event time
        self.schedule = TickSchedule(settings.tick_every, settings.tick_interval)
        self.watch = DeadLetterWatch(self.dead_letters.counts, self.log)
        window = settings.window
        self.recent = (
            RecentIds(horizon=window.seconds + settings.allowed_lateness)
            if isinstance(window, TimeWindow)
            else RecentIds(keep_last=window.size if window else sys.maxsize)
        )
        self._last_checkpoint_at = time.monotonic()
        self._unwritten = (0, "")  # checkpoints not written since the last one that was, and why
        self._unsaved = False  # records taken since the last checkpoint
        self._lock = threading.Lock()
        self._arrivals = itertools.count()  # breaks ties between waiting baskets of equal time

    # ----------------------------------------------------------------- control
    def stop(self) -> None:
        """Ask the loop to finish: a last tick, checkpoint, commit, return 0 (signal-safe).
        A tick still running ``ABANDON_AFTER`` seconds after the stop is abandoned, so
        stopping never waits for a long mine."""
        self.stopping = True

    def run(self) -> int:
        """Process records until the source is exhausted or stopped; return the exit code."""
        self._restore()
        held = dict(self.ledger.held)
        resume = self.source.seek(held, self.source_identity)
        self._resume_at = {p: o for p, o in resume.items() if o != held.get(p)}
        for partition, offset in self._resume_at.items():
            self.ledger.starts_at(partition, offset)
        self.source.handover = self
        if self.talk_when_clean:
            print(f"stream-miner: reading {self.source.name}", file=self.log, flush=True)
        try:
            self._loop()
            if self.schedule.final_due(self.consumed) and (self.tick_on_stop or not self.stopping):
                self._tick()
        except MiningInterrupted:
            print(
                f"stream-miner: stopped during a tick; {plural(self.schedule.ticks, 'tick')} done",
                file=self.log,
            )
        except ResultTooLarge as error:
            print(f"stream-miner: error: {error}", file=self.log)
            self._finish()
            return EXIT_USAGE
        except SourceChanged as error:  # what was read is kept; no offsets are committed
            self._save(final=True)
            self.source.handover = None
            print(f"stream-miner: error: {error}", file=self.log)
            return EXIT_USAGE
        self._finish()
        self._summarise()
        return EXIT_OK

    def _finish(self) -> None:
        """The last checkpoint and commit; afterwards closing the source hands nothing over
        (the outputs may be closed first)."""
        try:
            self._checkpoint(final=True)
        finally:
            self.source.handover = None

    def _loop(self) -> None:
        while not self.stopping:
            records = self.source.poll()
            self._withdraw()
            for record in records:
                with self._lock:  # a rebalance on the client's thread may checkpoint at any time
                    if record.learn_only:
                        self._learn(record.payload, record.partition, record.offset)
                    else:
                        self._take(record.payload, record.partition, record.offset)
                if self._due_after_record():
                    self._tick()
            self.progress.update(self.source.position, self.consumed)
            if self._due_after_poll():
                self._tick()
            if self._unsaved:
                self._checkpoint_if_due()  # also between ticks: nothing read waits long for one
            if self.source.exhausted():
                with self._lock:
                    self._release(math.inf)  # no later basket can come: the waiting ones enter
                return
            if not records:
                time.sleep(IDLE_WAIT)

    # ----------------------------------------------------------------- records
    def _learn(self, payload: Basket | DeadLetter, partition: int, offset: int) -> None:
        """Remember the id of a basket another member counted (read again on taking its
        partition over), so a repeat of it is skipped here too."""
        timed = isinstance(self.settings.window, TimeWindow)
        if isinstance(payload, Basket) and payload.id is not None and (payload.ts is not None or not timed):
            self.recent.check_and_add(payload.id, payload.ts, origin_tag(partition, offset))

    def _take(self, payload: Basket | DeadLetter, partition: int, offset: int) -> None:
        self.ledger.took(partition, offset)
        self._unsaved = True
        self.watch.record()
        if isinstance(payload, DeadLetter):
            self.dead_letters.write(payload)
            return
        window = self.settings.window
        if isinstance(window, TimeWindow) and payload.ts is None:
            self._refuse(
                payload,
                "no event time",
                "an event-time window needs a time on every basket",
                partition,
                offset,
            )
            return
        if payload.id is not None and self.recent.check_and_add(
            payload.id, payload.ts, origin_tag(partition, offset)
        ):
            self.counts["duplicates skipped"] += 1
            return
        if not isinstance(window, TimeWindow):
            self._enter(payload, partition, offset)
            return
        assert payload.ts is not None
        self.newest = max(self.newest, payload.ts)
        watermark = self._watermark_after(partition, payload.ts)
        if payload.ts <= watermark - window.seconds:
            if self.settings.drop_late:
                self.counts["dropped as too late"] += 1
            else:
                self._refuse(payload, "too late", "older than the watermark allows", partition, offset)
            return
        heapq.heappush(self.waiting, (payload.ts, next(self._arrivals), payload, partition, offset))
        self._release(watermark)

    def _watermark_after(self, partition: int, ts: float) -> float:
        """The watermark once a basket of ``partition`` at event time ``ts`` was read: the
        newest event time seen less the allowed lateness."""
        return self.newest - self.settings.allowed_lateness

    def _release(self, watermark: float) -> None:
        """Move every waiting basket at or before the watermark into the window."""
        if self.waiting:
            self.watermark = min(watermark, self.newest)
            self.miner.advance_time(self.watermark)
        while self.waiting and self.waiting[0][0] <= watermark:
            _, _, basket, partition, offset = heapq.heappop(self.waiting)
            self._enter(basket, partition, offset)

    def _enter(self, basket: Basket, partition: int, offset: int) -> None:
        if basket.ts is not None and basket.ts < self.earliest:
            self.earliest = basket.ts
        verdict = self.miner.add(basket.items, basket.ts, origin_tag(partition, offset))
        if verdict is Verdict.SKIPPED_OVERSIZE:
            detail = f"{len(basket.items)} distinct items, limit {self.settings.policy.max_items}"
            self._refuse(basket, "basket too large", detail, partition, offset)
        elif verdict in (Verdict.ACCEPTED, Verdict.TRUNCATED):
            self.consumed += 1
            self.last_id = basket.id
            self.ledger.counted(partition, offset)

    def _refuse(self, basket: Basket, reason: str, detail: str, partition: int, offset: int) -> None:
        raw = basket.raw or json.dumps({"id": basket.id, "ts": basket.ts, "items": basket.items}).encode()
        self.dead_letters.write(DeadLetter(raw, reason, detail, self.source.name, partition, offset))

    # ------------------------------------------------------------------- ticks
    def _due_after_record(self) -> bool:
        """Whether a tick is due after the record just taken (every N baskets)."""
        return self.schedule.count_due(self.consumed)

    def _due_after_poll(self) -> bool:
        """Whether a tick is due after a poll's records were taken (every S seconds)."""
        return self.schedule.interval_due()

    def _tick(self) -> None:
        if not self.silent_ticks:
            self.progress.close()
        report = self._detect(self._refresh_off_the_main_thread())
        self.schedule.ticked(report.consumed)
        if report.events and self.events is not None:
            self.events.write([event.as_json() for event in report.events])
        for listener in self.listeners:
            listener.on_tick(report)
        self.watch.check()
        if report.events and self.settings.checkpoint_dir is not None:
            self._checkpoint()  # held events go out once it is durable: now, not at the next one
        else:
            self._checkpoint_if_due()

    def _detect(self, report: TickReport) -> TickReport:
        """Count the tick in the miner and feed it to the drift detector, together under the
        lock (on the loop's thread, so an abandoned tick never half-updates them); the report
        with its events and patterns. Event-time windows
        end at the watermark (baskets given back to another group member shift the numbers
        of a count window's later baskets, so comparisons across a handover are approximate)."""
        with self._lock:
            self.miner.accept(report.tick)
            if self.detector is None:
                return report
            tag = self.miner.oldest_tag()
            first_id = None if tag is None else self.recent.id_at(tag)
            earliest = None if self.earliest == math.inf else self.earliest
            events = self.detector.follow(
                self.miner, report.tick, first_id=first_id, last_id=self.last_id, earliest=earliest
            )
            patterns = self.detector.patterns()
        return replace(report, events=tuple(events), patterns=tuple(patterns))

    def _checkpoint_if_due(self) -> None:
        if time.monotonic() - self._last_checkpoint_at >= self.settings.checkpoint_interval:
            self._checkpoint()

    def _refresh_off_the_main_thread(self) -> TickReport:
        """:meth:`_refresh` on a worker thread (see :meth:`_on_worker`)."""
        return self._on_worker(self._refresh)

    def _on_worker(self, job: Callable[[], Done]) -> Done:
        """Run ``job`` on a worker thread, so that signals are handled at once and a Kafka
        source keeps polling meanwhile; its result. Once a stop is asked for, the job gets
        ``ABANDON_AFTER`` seconds to finish; then the interrupt is set, the job is abandoned
        and :class:`MiningInterrupted` is raised here."""
        outcome: dict[str, object] = {}

        def work() -> None:
            try:
                outcome["report"] = job()
            except BaseException as error:  # handed back to the loop's thread below
                outcome["error"] = error

        worker = threading.Thread(target=work, name=TICK_THREAD, daemon=True)
        worker.start()
        stopped_at: list[float] = []

        def busy() -> bool:
            worker.join(BUSY_WAIT)
            if self.stopping and worker.is_alive():
                stopped_at[:] = stopped_at or [time.monotonic()]
                if time.monotonic() - stopped_at[0] >= ABANDON_AFTER:
                    self.interrupt.set()  # the worker gives up at its next check
                    return False
            return worker.is_alive()

        self.source.while_busy(busy)
        if worker.is_alive():
            raise MiningInterrupted("the tick was abandoned on stop")
        if "error" in outcome:
            raise outcome["error"]  # type: ignore[misc]
        return outcome["report"]  # type: ignore[return-value]

    def _refresh(self) -> TickReport:
        """Update the window and refresh the result (on a worker thread for sources that keep
        polling meanwhile)."""
        started = time.perf_counter()
        with self._lock:  # the tick itself changes nothing a checkpoint reads
            self.miner.flush()
        applied = time.perf_counter()
        tick = self.miner.tick(
            self.settings.params,
            refresh=self.settings.refresh,
            interrupt=self.interrupt,
            defer=True,
            last=self.stopping,
        )  # counted by _detect, under the lock with the detector's step: a checkpoint sees both or neither
        done = time.perf_counter()
        window = self.settings.window
        start = end = None
        if isinstance(window, TimeWindow) and self.watermark > -math.inf:
            end = self.watermark
            start = end - window.seconds
        return TickReport(tick, self.consumed, self.last_id, start, end, applied - started, done - applied)

    # -------------------------------------------------------------- handovers
    def before_revoke(self) -> dict[int, int]:
        """Partitions are about to move to another member: a checkpoint first."""
        return self._save()

    def after_commit(self, positions: dict[int, int], outcome: CommitOutcome) -> None:
        """Record what became of a commit; an acknowledged one lets the dead letters below it
        out. The note beside the checkpoint says so at once, so a crash right after cannot
        write them twice or forget that the commit landed."""
        with self._lock:
            self.ledger.outcome(positions, outcome)
            self.dead_letters.release(self.ledger.landed)
            if self.settings.checkpoint_dir is not None and self.sequence:
                from stream_miner.runtime.commit_note import write_note  # only with checkpoints

                sink = self.dead_letters.sink
                try:
                    write_note(
                        self.settings.checkpoint_dir, self.sequence, positions, outcome, sink.position()
                    )
                except OSError as error:  # a restart then takes the outcome as unknown
                    print(
                        "stream-miner: warning: cannot write the commit note in "
                        f"{self.settings.checkpoint_dir} ({error.strerror or error}); "
                        "a restart takes this commit's outcome as unknown",
                        file=self.log,
                    )

    def held_partitions(self) -> set[int]:
        """Partitions this member has read."""
        return set(self.ledger.held)

    def on_assigned(self, committed: dict[int, int | None], assigned: set[int]) -> dict[int, int | None]:
        """After a rebalance: give back, partition by partition, what the group's committed
        offsets show another member counts (or this member reads again); return where each
        assigned partition is read from."""
        starts: dict[int, int | None] = {}
        with self._lock:
            for partition, offset in sorted(committed.items()):
                if partition in assigned:  # an accepted new log outranks the group's offset
                    offset = self._resume_at.pop(partition, offset)
                boundary = self.ledger.boundary(partition, offset)
                if boundary < self.ledger.held.get(partition, 0):
                    self._give_back(partition, boundary)
                if partition in assigned:
                    starts[partition] = self._start_of(partition, offset, boundary)
        return starts

    def _start_of(self, partition: int, committed: int | None, boundary: int) -> int | None:
        """Where to read an assigned partition: the group's offset, unless it lies below what
        this member counted for good (offsets moved back outside stream-miner: reading again
        would count twice); None when neither has a position (the reset policy decides)."""
        if committed is None and partition not in self.ledger.landed:
            return None
        start = max(committed or 0, boundary)
        if committed is not None and committed < boundary:
            print(
                f"stream-miner: warning: partition {partition}: the group's offset {committed:,} "
                f"lies below what this member counted ({boundary:,}); reading on from {boundary:,} "
                "(--start-fresh reads from the group's offset with an empty window)",
                file=self.log,
                flush=True,
            )
        self.ledger.starts_at(partition, start)
        return start

    def _give_back(self, partition: int, boundary: int) -> None:
        """Everything of ``partition`` read at or beyond ``boundary`` is another member's (or
        is read again): uncount it, forget its ids, drop its waiting baskets and dead letters;
        the window lets go of it before the next record is taken (:meth:`_withdraw`)."""
        returned = self.ledger.give_back(partition, boundary)
        self.consumed -= returned
        if returned:
            self.counts["given back"] += returned
        self.recent.forget(*tags_from(partition, boundary))
        self.waiting = [w for w in self.waiting if not (w[3] == partition and w[4] >= boundary)]
        heapq.heapify(self.waiting)
        self.dead_letters.give_back(partition, boundary)
        self._withdrawals.append((partition, boundary))
        print(
            f"stream-miner: partition {partition}: from offset {boundary:,} on, another member "
            f"counts (or this one reads again); {plural(returned, 'basket')} given back",
            file=self.log,
            flush=True,
        )

    def _withdraw(self) -> None:
        """Take baskets given back out of the window (on the loop's thread: never while a tick
        runs)."""
        with self._lock:
            for partition, boundary in self._withdrawals:
                self.miner.withdraw(*tags_from(partition, boundary))
            self._withdrawals.clear()

    # -------------------------------------------------------------- checkpoints
    def _checkpoint(self, *, final: bool = False) -> None:
        """Save a checkpoint, then commit the offsets it covers and record what became of it."""
        positions = self._save(final=final)
        if positions:
            self.after_commit(*self.source.commit(positions))

    def _save(self, *, final: bool = False) -> dict[int, int]:
        """Save a checkpoint (durable on return); the offsets it covers, none without one.
        A checkpoint that cannot be written covers none, so nothing is committed: a warning
        (once until one is written again, or when the cause changes) and the next one retries;
        the final one raises :class:`CheckpointWriteError` (an OSError) instead."""
        self._last_checkpoint_at = time.monotonic()
        if self.settings.checkpoint_dir is None:
            return {}
        # imported only with checkpoints: `mine` never loads the module
        from stream_miner.runtime.checkpoint import CheckpointWriteError, save_checkpoint

        with self._lock:  # a rebalance may ask for a checkpoint while a tick is running
            positions = dict(self.ledger.held)
            self.ledger.sent(positions)
            self.sequence += 1
            saved_at = time.time()
            metadata = {
                "source": self.source.name,
                "source_identity": self.source.identity(),
                "sequence": self.sequence,
                "ledger": self.ledger.state(),
                "withdrawals": [list(w) for w in self._withdrawals],
                "dead_letters": self.dead_letters.state(),
                "consumed": self.consumed,
                "last_id": self.last_id,
                "newest": None if self.newest == -math.inf else self.newest,
                "watermark": None if self.watermark == -math.inf else self.watermark,
                "waiting": [
                    [ts, b.items, b.id, p, o] for ts, _, b, p, o in sorted(self.waiting, key=lambda w: w[:2])
                ],
                "recent": self.recent.state(),
                "counts": dict(self.counts),
                "records": self.watch.records,
                "earliest": None if self.earliest == math.inf else self.earliest,
                "saved_at": saved_at,
            }
            if self.detector is not None:
                metadata["drift"] = self.detector.state()
            if self.events is not None:
                metadata["events"] = self.events.state()
            try:
                path = save_checkpoint(self.settings.checkpoint_dir, self.miner, metadata)
            except CheckpointWriteError as error:
                if final:
                    raise
                self._tell_unwritten(str(error))
                return {}
            self._unsaved = False
            self.checkpointed_at = saved_at
            self._tell_written(path)
            if self.events is not None:
                self.events.release(self.settings.checkpoint_dir, self.sequence)
            return positions

    def _tell_unwritten(self, cause: str) -> None:
        """Warn about a checkpoint that was not written: at the first failure, and again only
        when the cause changes."""
        failed, last = self._unwritten
        if cause != last:
            print(
                f"stream-miner: warning: {cause}; nothing is committed until a checkpoint is written, "
                "the next one retries",
                file=self.log,
            )
        self._unwritten = (failed + 1, cause)

    def _tell_written(self, path: Path) -> None:
        """Say when a checkpoint is written again after failures."""
        failed, _ = self._unwritten
        if failed:
            print(
                f"stream-miner: checkpoint {path} written again after {plural(failed, 'failed attempt')}",
                file=self.log,
            )
            self._unwritten = (0, "")

    def _restore(self) -> None:
        directory = self.settings.checkpoint_dir
        if directory is None:
            return
        if self.settings.start_fresh:  # the notes describe the checkpoint being discarded
            from stream_miner.runtime.commit_note import NOTE_NAME as COMMIT_NOTE
            from stream_miner.runtime.event_outbox import NOTE_NAME as EVENTS_NOTE

            for name in (COMMIT_NOTE, EVENTS_NOTE):
                (directory / name).unlink(missing_ok=True)
            self._save()  # the old window is gone now, also for a restart without the option
            return
        from stream_miner.runtime.checkpoint import CheckpointError, load_checkpoint  # only with checkpoints

        restored = load_checkpoint(
            directory, window=self.settings.window, policy=self.settings.policy, fresh_option="--start-fresh"
        )
        if restored is None:
            if self.source.has_progress():
                raise CheckpointError(
                    f"no checkpoint in {directory}, but {self.source.name} has offsets committed by "
                    "this consumer group: this member's window was lost, or the member is new; "
                    "pass --start-fresh to start with an empty window"
                )
            print(f"stream-miner: no checkpoint in {directory}: starting with an empty window", file=self.log)
            self._save()  # a member stopped before its first tick's checkpoint starts again as it began
            return
        self.miner, metadata = restored

        def refuse(problem: str) -> CheckpointError:
            return CheckpointError(f"checkpoint in {directory}: {problem}; pass --start-fresh to discard it")

        if not isinstance(metadata, dict) or "source" not in metadata:
            raise refuse("it holds no run state (not written by `run`)")
        if metadata["source"] != self.source.name:
            raise refuse(f"it was made reading {metadata['source']}, but this run reads {self.source.name}")
        try:
            self._take_run_state(metadata)
        except (KeyError, TypeError, ValueError, AttributeError) as error:
            raise refuse(f"its run state is malformed ({type(error).__name__}: {error})") from None
        print(
            f"stream-miner: resumed from {directory} at tick {self.miner.next_tick}, "
            f"{self.consumed:,} baskets consumed",
            file=self.log,
        )

    def _take_run_state(self, metadata: dict) -> None:
        """The loop's own state from a checkpoint's metadata (see :meth:`_save`), with what
        the note beside it says became of the commit that followed it."""
        if "ledger" in metadata:
            self.sequence = int(metadata["sequence"])
            self.ledger = PartitionLedger.from_state(metadata["ledger"])
            self._withdrawals = [(int(p), int(o)) for p, o in metadata["withdrawals"]]
            self._withdraw()
            self._take_commit_outcome(metadata)
        else:  # made by stream-miner 0.2: offsets only, taken as committed
            offsets = {int(p): int(o) for p, o in metadata["offsets"].items()}
            self.ledger.held, self.ledger.landed = dict(offsets), dict(offsets)
        self.source_identity = {str(k): str(v) for k, v in metadata.get("source_identity", {}).items()}
        self.consumed = int(metadata["consumed"])
        self.last_id = metadata["last_id"]
        self.newest = -math.inf if metadata["newest"] is None else float(metadata["newest"])
        self.watermark = -math.inf if metadata["watermark"] is None else float(metadata["watermark"])
        self.waiting = [
            (ts, next(self._arrivals), Basket(items, basket_id, ts), partition, offset)
            for ts, items, basket_id, partition, offset in metadata["waiting"]
        ]
        heapq.heapify(self.waiting)
        self.recent = RecentIds.from_state(metadata["recent"])
        self.counts = Counter(metadata["counts"])
        self.watch.records = int(metadata.get("records", 0))  # checkpoints before 0.3 did not keep it
        earliest = metadata.get("earliest")
        self.earliest = math.inf if earliest is None else float(earliest)
        self._take_drift_state(metadata)
        self.checkpointed_at = metadata.get("saved_at")  # nor this
        self.schedule.restored(self.miner.next_tick, self.consumed)

    def _take_drift_state(self, metadata: dict) -> None:
        """The detector and the events held at the checkpoint; events the note beside it does
        not show as written are written now (that checkpoint is durable)."""
        if self.detector is not None and "drift" in metadata:
            assert self.settings.drift is not None
            from stream_miner.drift.detector import DriftDetector

            self.detector = DriftDetector.restored(metadata["drift"], self.settings.drift)
        if self.detector is None and self.miner.keeping_past:
            self.miner.stop_keeping_past()  # kept for a detector this run does not have
        if self.events is not None and "events" in metadata and self.settings.checkpoint_dir is not None:
            self.events.restore(metadata["events"], self.settings.checkpoint_dir, self.sequence)
            self.events.release(self.settings.checkpoint_dir, self.sequence)

    def _take_commit_outcome(self, metadata: dict) -> None:
        """Apply the note on the commit of the checkpoint's positions (the ledger's ``held``):
        its outcome, and the dead letters it already let out. Without a note the outcome is
        unknown, except for a source nobody else reads, where the checkpoint alone is the
        record; the letters it would have let out are written now."""
        from stream_miner.runtime.commit_note import read_note

        assert self.settings.checkpoint_dir is not None
        noted = read_note(self.settings.checkpoint_dir, self.sequence)
        guess = CommitOutcome.UNKNOWN if self.source.shares_partitions else CommitOutcome.ACKED
        positions, outcome, written = noted or (dict(self.ledger.held), guess, None)
        self.dead_letters.restore(metadata["dead_letters"], written)
        self.ledger.outcome(positions, outcome)
        self.dead_letters.release(self.ledger.landed, write=noted is None)  # else written before

    def figures(self) -> RunFigures:
        """The counts as one consistent set (safe from any thread: taken under the loop's lock,
        so a call may wait for a checkpoint being written)."""
        with self._lock:
            letters = self.dead_letters
            timed = isinstance(self.settings.window, TimeWindow) and self.watermark > -math.inf
            return RunFigures(
                consumed=self.consumed,
                given_back=self.counts["given back"],
                duplicates=self.counts["duplicates skipped"],
                dropped_late=self.counts["dropped as too late"],
                rejected=dict(letters.counts),
                rejected_given_back=dict(letters.given_back),
                ticks=self.schedule.ticks,
                emerged=self.detector.emerged_total if self.detector else 0,
                faded=self.detector.faded_total if self.detector else 0,
                watermark=self.watermark if timed else None,
                checkpointed_at=self.checkpointed_at,
                lag=self.source.lag(),
            )

    def _summarise(self) -> None:
        self.progress.close()
        self.watch.check(at_end=True)
        letters, verdicts = self.dead_letters.counts, self.miner.verdicts
        if self.talk_when_clean or letters or self.counts or verdicts[Verdict.TRUNCATED]:
            line = summary(self.consumed, self.schedule.ticks, self.counts, letters, verdicts)
            if self.detector is not None:
                line += (
                    f"; patterns: {self.detector.emerged_total} emerged, {self.detector.faded_total} faded, "
                    f"{self.detector.active_count} active"
                )
            print(f"stream-miner: {line}", file=self.log)
