"""The run loop shared by ``mine`` and ``run``: source -> checks -> window -> ticks -> listeners.

Per record: a dead letter goes to the dead-letter sink; a basket seen before (same id,
within the window plus lateness) is counted and skipped; with an event-time window, a
basket later than the watermark allows (``ts <= newest - lateness - window``) is set aside
as ``too late`` (or dropped by option, always counted), a basket newer than the watermark
(``newest - lateness``) waits in a small buffer until the watermark passes it, and the
rest enter the window, where they land in the right place; a basket over the size cap is
set aside as ``basket too large``. Ticks follow :class:`~stream_miner.runtime.schedule.TickSchedule`
and are handed to every :class:`~stream_miner.runtime.protocols.TickListener`.
Checkpoints (periodic, at the end and on stop) hold the window, the tick history, the next
offset per partition, the duplicate memory and the watermark buffer; offsets are committed
to the source only after the checkpoint covering them is durable.
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
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TextIO

from stream_miner.decoding.records import Basket, DeadLetter
from stream_miner.engine.hygiene import BasketPolicy, Verdict
from stream_miner.engine.limits import MiningInterrupted, ResultTooLarge
from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.window import CountWindow, TimeWindow
from stream_miner.runtime.dedup import RecentIds
from stream_miner.runtime.health import DeadLetterWatch, plural, summary
from stream_miner.runtime.progress import ProgressLine
from stream_miner.runtime.protocols import DeadLetterSink, Source, SourceChanged, TickListener, TickReport
from stream_miner.runtime.schedule import TickSchedule

EXIT_OK, EXIT_USAGE = 0, 2
IDLE_WAIT = 0.05  # seconds to wait after a poll that returned nothing
BUSY_WAIT = 0.05  # seconds between looks at a running tick
ABANDON_AFTER = 0.2  # seconds a running tick gets to finish after a stop before it is abandoned
TICK_THREAD = "stream-miner-tick"  # the name of the worker thread a tick runs on


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
    full_remine: bool = False
    checkpoint_dir: Path | None = None
    checkpoint_interval: float = 30.0
    start_fresh: bool = False

    def __post_init__(self) -> None:
        TickSchedule(self.tick_every, self.tick_interval)  # validates the tick options
        if self.allowed_lateness < 0:
            raise ValueError("--allowed-lateness must not be negative")
        if self.allowed_lateness and not isinstance(self.window, TimeWindow):
            raise ValueError("--allowed-lateness needs an event-time window (--window-time)")


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
        talk_when_clean: bool = True,
        tick_on_stop: bool = True,
    ) -> None:
        self.settings = settings
        self.source = source
        self.dead_letters = dead_letters
        self.listeners = list(listeners)
        self.log = log or sys.stderr
        self.talk_when_clean = talk_when_clean  # False: say nothing unless something was set aside
        self.tick_on_stop = tick_on_stop  # False: a stop skips the last tick (mine: no partial result)
        self.progress = ProgressLine(self.log)
        self.stopping = False
        self.interrupt = threading.Event()  # set to make a mine give up (see ABANDON_AFTER)
        self.counts: Counter[str] = Counter()
        self.miner = WindowMiner(settings.window, settings.policy)
        self.offsets: dict[int, int] = {}
        self.source_identity: dict[str, str] = {}  # the source's identity when the checkpoint was made
        self.consumed = 0
        self.last_id: str | None = None
        self.newest = -math.inf
        self.watermark = -math.inf  # where an event-time window ends: newest - lateness, or newest at the end
        self.waiting: list[tuple[float, int, Basket, int, int]] = []  # heap by event time
        self.schedule = TickSchedule(settings.tick_every, settings.tick_interval)
        self.watch = DeadLetterWatch(dead_letters.counts, self.log)
        window = settings.window
        self.recent = (
            RecentIds(horizon=window.seconds + settings.allowed_lateness)
            if isinstance(window, TimeWindow)
            else RecentIds(keep_last=window.size if window else sys.maxsize)
        )
        self._last_checkpoint_at = time.monotonic()
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
        self.offsets = self.source.seek(self.offsets, self.source_identity)
        self.source.revoke_handler = self._hand_over  # checkpoint before partitions move away
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
            self._checkpoint()
            print(f"stream-miner: error: {error}", file=self.log)
            return EXIT_USAGE
        except SourceChanged as error:  # what was read is kept; no offsets are committed
            self._hand_over()
            print(f"stream-miner: error: {error}", file=self.log)
            return EXIT_USAGE
        self._checkpoint()
        self._summarise()
        return EXIT_OK

    def _loop(self) -> None:
        while not self.stopping:
            records = self.source.poll()
            for record in records:
                with self._lock:  # a rebalance on the client's thread may checkpoint at any time
                    self._take(record.payload, record.partition, record.offset)
                if self.schedule.count_due(self.consumed):
                    self._tick()
            self.progress.update(self.source.position, self.consumed)
            if self.schedule.interval_due():
                self._tick()
            if self.source.exhausted():
                with self._lock:
                    self._release(math.inf)  # no later basket can come: the waiting ones enter
                return
            if not records:
                time.sleep(IDLE_WAIT)

    # ----------------------------------------------------------------- records
    def _take(self, payload: Basket | DeadLetter, partition: int, offset: int) -> None:
        self.offsets[partition] = offset + 1
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
        if payload.id is not None and self.recent.check_and_add(payload.id, payload.ts):
            self.counts["duplicates skipped"] += 1
            return
        if not isinstance(window, TimeWindow):
            self._enter(payload, partition, offset)
            return
        assert payload.ts is not None
        self.newest = max(self.newest, payload.ts)
        watermark = self.newest - self.settings.allowed_lateness
        if payload.ts <= watermark - window.seconds:
            if self.settings.drop_late:
                self.counts["dropped as too late"] += 1
            else:
                self._refuse(payload, "too late", "older than the watermark allows", partition, offset)
            return
        heapq.heappush(self.waiting, (payload.ts, next(self._arrivals), payload, partition, offset))
        self._release(watermark)

    def _release(self, watermark: float) -> None:
        """Move every waiting basket at or before the watermark into the window."""
        if self.waiting:
            self.watermark = min(watermark, self.newest)
            self.miner.advance_time(self.watermark)
        while self.waiting and self.waiting[0][0] <= watermark:
            _, _, basket, partition, offset = heapq.heappop(self.waiting)
            self._enter(basket, partition, offset)

    def _enter(self, basket: Basket, partition: int, offset: int) -> None:
        verdict = self.miner.add(basket.items, basket.ts)
        if verdict is Verdict.SKIPPED_OVERSIZE:
            detail = f"{len(basket.items)} distinct items, limit {self.settings.policy.max_items}"
            self._refuse(basket, "basket too large", detail, partition, offset)
        elif verdict in (Verdict.ACCEPTED, Verdict.TRUNCATED):
            self.consumed += 1
            self.last_id = basket.id

    def _refuse(self, basket: Basket, reason: str, detail: str, partition: int, offset: int) -> None:
        raw = basket.raw or json.dumps({"id": basket.id, "ts": basket.ts, "items": basket.items}).encode()
        self.dead_letters.write(DeadLetter(raw, reason, detail, self.source.name, partition, offset))

    # ------------------------------------------------------------------- ticks
    def _tick(self) -> None:
        self.progress.close()
        report = self._refresh_off_the_main_thread()
        self.schedule.ticked(report.consumed)
        for listener in self.listeners:
            listener.on_tick(report)
        self.watch.check()
        if time.monotonic() - self._last_checkpoint_at >= self.settings.checkpoint_interval:
            self._checkpoint()

    def _refresh_off_the_main_thread(self) -> TickReport:
        """Run :meth:`_refresh` on a worker thread, so that signals are handled at once and a
        Kafka source keeps polling meanwhile. Once a stop is asked for, the tick gets
        ``ABANDON_AFTER`` seconds to finish; then the interrupt is set, the tick is abandoned
        and :class:`MiningInterrupted` is raised here."""
        outcome: dict[str, object] = {}

        def work() -> None:
            try:
                outcome["report"] = self._refresh()
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
            self.settings.params, full_remine=self.settings.full_remine, interrupt=self.interrupt
        )
        done = time.perf_counter()
        window = self.settings.window
        start = end = None
        if isinstance(window, TimeWindow) and self.watermark > -math.inf:
            end = self.watermark
            start = end - window.seconds
        return TickReport(tick, self.consumed, self.last_id, start, end, applied - started, done - applied)

    # -------------------------------------------------------------- checkpoints
    def _checkpoint(self) -> None:
        """Save a checkpoint, then commit the offsets it covers (dead letters sent first)."""
        offsets = self._hand_over()
        if offsets:
            self.source.commit(offsets)

    def _hand_over(self) -> dict[int, int]:
        """Before partitions move to another member: a checkpoint, and the dead letters sent,
        so the offsets committed next cover all of it."""
        offsets = self._save()
        if offsets:
            self.dead_letters.flush()
        return offsets

    def _save(self) -> dict[int, int]:
        """Save a checkpoint (durable on return); the offsets it covers, none without one."""
        self._last_checkpoint_at = time.monotonic()
        if self.settings.checkpoint_dir is None:
            return {}
        with self._lock:  # a rebalance may ask for a checkpoint while a tick is running
            offsets = dict(self.offsets)
            metadata = {
                "source": self.source.name,
                "source_identity": self.source.identity(),
                "offsets": {str(p): o for p, o in offsets.items()},
                "consumed": self.consumed,
                "last_id": self.last_id,
                "newest": None if self.newest == -math.inf else self.newest,
                "watermark": None if self.watermark == -math.inf else self.watermark,
                "waiting": [
                    [ts, b.items, b.id, p, o] for ts, _, b, p, o in sorted(self.waiting, key=lambda w: w[:2])
                ],
                "recent": self.recent.state(),
                "counts": dict(self.counts),
            }
            from stream_miner.runtime.checkpoint import save_checkpoint  # only with checkpoints

            save_checkpoint(self.settings.checkpoint_dir, self.miner, metadata)
            return offsets

    def _restore(self) -> None:
        directory = self.settings.checkpoint_dir
        if directory is None or self.settings.start_fresh:
            return
        from stream_miner.runtime.checkpoint import load_checkpoint  # only with checkpoints

        restored = load_checkpoint(
            directory, window=self.settings.window, policy=self.settings.policy, fresh_option="--start-fresh"
        )
        if restored is None:
            return
        self.miner, metadata = restored
        from stream_miner.runtime.checkpoint import CheckpointError

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
        """The loop's own state from a checkpoint's metadata (see :meth:`_save`)."""
        self.offsets = {int(p): int(o) for p, o in metadata["offsets"].items()}
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
        self.schedule.restored(self.miner.next_tick, self.consumed)

    def _summarise(self) -> None:
        self.progress.close()
        self.watch.check(at_end=True)
        letters, verdicts = self.dead_letters.counts, self.miner.verdicts
        if self.talk_when_clean or letters or self.counts or verdicts[Verdict.TRUNCATED]:
            line = summary(self.consumed, self.schedule.ticks, self.counts, letters, verdicts)
            print(f"stream-miner: {line}", file=self.log)
