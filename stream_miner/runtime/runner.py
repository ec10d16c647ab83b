"""The long-running loop of ``stream-miner run``: source -> checks -> window -> ticks -> sinks.

Per record: a dead letter goes to the dead-letter sink; a basket seen before (same id,
within the window plus lateness) is counted and skipped; with an event-time window, a
basket later than the watermark allows (``ts <= newest - lateness - window``) is set aside
as ``too late`` (or dropped by option, always counted), a basket newer than the watermark
(``newest - lateness``) waits in a small buffer until the watermark passes it, and the
rest enter the window, where they land in the right place. A tick (every N accepted baskets
or every S seconds) refreshes the result incrementally and rewrites the snapshot file.
Checkpoints (periodic, at the end and on stop) hold the window, the vocabulary, the next
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
from dataclasses import dataclass
from pathlib import Path
from typing import Protocol, TextIO

from stream_miner.cli.output import json_lines
from stream_miner.decoding.messages import Basket, DeadLetter
from stream_miner.engine.hygiene import BasketPolicy, Verdict
from stream_miner.engine.miner import WindowMiner
from stream_miner.engine.params import MiningParams
from stream_miner.engine.result import MiningResult
from stream_miner.engine.window import CountWindow, TimeWindow
from stream_miner.runtime.atomic_file import write_text_atomically
from stream_miner.runtime.checkpoint import load_checkpoint, save_checkpoint
from stream_miner.runtime.dedup import RecentIds


class Source(Protocol):
    """What the runtime needs from a source of records."""

    name: str

    def seek(self, positions: dict[int, int]) -> None: ...
    def poll(self, max_records: int = 500) -> list: ...
    def exhausted(self) -> bool: ...
    def commit(self, positions: dict[int, int]) -> None: ...
    def close(self) -> None: ...


class DeadLetterSink(Protocol):
    counts: Counter[str]

    def write(self, letter: DeadLetter) -> None: ...
    def flush(self) -> None: ...


@dataclass(frozen=True)
class RunSettings:
    """How ``run`` windows, ticks, checkpoints and writes its snapshot."""

    window: CountWindow | TimeWindow
    params: MiningParams
    policy: BasketPolicy = BasketPolicy()
    allowed_lateness: float = 0.0
    drop_late: bool = False
    tick_every: int | None = None
    tick_interval: float | None = None
    checkpoint_dir: Path | None = None
    checkpoint_interval: float = 30.0
    start_fresh: bool = False
    snapshot_out: Path | None = None

    def __post_init__(self) -> None:
        if (self.tick_every is None) == (self.tick_interval is None):
            raise ValueError("give exactly one of --tick-every and --tick-interval")
        if self.allowed_lateness < 0:
            raise ValueError("--allowed-lateness must not be negative")
        if self.allowed_lateness and not isinstance(self.window, TimeWindow):
            raise ValueError("--allowed-lateness needs an event-time window (--window-time)")


class Runner:
    """Runs one source through the window until it ends or :meth:`stop` is called."""

    def __init__(
        self, settings: RunSettings, source: Source, dead_letters: DeadLetterSink, log: TextIO | None = None
    ) -> None:
        self.settings = settings
        self.source = source
        self.dead_letters = dead_letters
        self.log = log or sys.stderr
        self.stopping = False
        self.counts: Counter[str] = Counter()
        self.miner = WindowMiner(settings.window, settings.policy)
        self.offsets: dict[int, int] = {}
        self.consumed = 0
        self.tick = 0
        self.last_id: str | None = None
        self.newest = -math.inf
        self.waiting: list[tuple[float, int, list[str], str | None]] = []  # heap by event time
        window = settings.window
        self.recent = (
            RecentIds(keep_last=window.size)
            if isinstance(window, CountWindow)
            else RecentIds(horizon=window.seconds + settings.allowed_lateness)
        )
        self._since_tick = 0
        self._last_tick_at = time.monotonic()
        self._last_checkpoint_at = time.monotonic()
        self._lock = threading.Lock()
        self._arrivals = itertools.count()  # breaks ties between waiting baskets of equal time

    # ----------------------------------------------------------------- control
    def stop(self) -> None:
        """Ask the loop to finish: last tick, checkpoint, commit, return (signal-safe)."""
        self.stopping = True

    def run(self) -> int:
        """Process records until the source is exhausted or stopped; return the exit code."""
        self._restore()
        self.source.seek(self.offsets)
        if hasattr(self.source, "revoke_handler"):
            self.source.revoke_handler = self._save  # checkpoint before partitions move away
        print(f"stream-miner: reading {self.source.name}", file=self.log, flush=True)
        while not self.stopping:
            records = self.source.poll()
            for record in records:
                self._take(record.payload, record.partition, record.offset)
                if self.settings.tick_every is not None and self._since_tick >= self.settings.tick_every:
                    self._tick()
            if self.settings.tick_interval is not None and self._interval_elapsed():
                self._tick()
            if self.source.exhausted():
                break
            if not records:
                time.sleep(0.05)
        if self._since_tick or self.tick == 0:
            self._tick()
        self._checkpoint()
        self._summarise()
        return 0

    # ----------------------------------------------------------------- records
    def _take(self, payload: Basket | DeadLetter, partition: int, offset: int) -> None:
        self.offsets[partition] = offset + 1
        if isinstance(payload, DeadLetter):
            self.dead_letters.write(payload)
            return
        window = self.settings.window
        if isinstance(window, TimeWindow) and payload.ts is None:
            self.dead_letters.write(
                DeadLetter(
                    json.dumps({"id": payload.id, "items": payload.items}).encode(),
                    "no event time",
                    "an event-time window needs a time on every basket",
                    self.source.name,
                    partition,
                    offset,
                )
            )
            return
        if payload.id is not None and self.recent.check_and_add(payload.id, payload.ts):
            self.counts["duplicate"] += 1
            return
        if isinstance(window, CountWindow):
            self._enter(payload.items, payload.ts, payload.id)
            return
        assert payload.ts is not None
        self.newest = max(self.newest, payload.ts)
        watermark = self.newest - self.settings.allowed_lateness
        if payload.ts <= watermark - window.seconds:
            self._refuse_late(payload, partition, offset)
            return
        heapq.heappush(self.waiting, (payload.ts, next(self._arrivals), payload.items, payload.id))
        self._release(watermark)

    def _refuse_late(self, basket: Basket, partition: int, offset: int) -> None:
        if self.settings.drop_late:
            self.counts["dropped as too late"] += 1
        else:
            raw = json.dumps({"id": basket.id, "ts": basket.ts, "items": basket.items}).encode()
            self.dead_letters.write(
                DeadLetter(
                    raw, "too late", "older than the watermark allows", self.source.name, partition, offset
                )
            )

    def _release(self, watermark: float) -> None:
        """Move every waiting basket at or before the watermark into the window."""
        self.miner.advance_time(watermark)
        while self.waiting and self.waiting[0][0] <= watermark:
            ts, _, items, basket_id = heapq.heappop(self.waiting)
            self._enter(items, ts, basket_id)

    def _enter(self, items: list[str], ts: float | None, basket_id: str | None) -> None:
        verdict = self.miner.add(items, ts)
        if verdict in (Verdict.ACCEPTED, Verdict.TRUNCATED):
            self.consumed += 1
            self._since_tick += 1
            self.last_id = basket_id

    # ------------------------------------------------------------------- ticks
    def _interval_elapsed(self) -> bool:
        return time.monotonic() - self._last_tick_at >= (self.settings.tick_interval or 0)

    def _tick(self) -> None:
        busy = getattr(self.source, "while_busy", None)
        result = busy(self._mine) if busy is not None else self._mine()
        self._since_tick = 0
        self._last_tick_at = time.monotonic()
        if self.settings.snapshot_out is not None:
            header = {
                "type": "window",
                "size": result.n_baskets,
                "consumed": self.consumed,
                "last_id": self.last_id,
                "tick": self.tick,
            }
            lines = [json.dumps(header)] + json_lines(result)
            write_text_atomically(self.settings.snapshot_out, "\n".join(lines) + "\n")
        self.tick += 1
        if time.monotonic() - self._last_checkpoint_at >= self.settings.checkpoint_interval:
            self._checkpoint()

    def _mine(self) -> MiningResult:
        """Refresh the result (on a worker thread for sources that keep polling meanwhile)."""
        with self._lock:
            return self.miner.tick(self.settings.params).result

    # -------------------------------------------------------------- checkpoints
    def _checkpoint(self) -> None:
        """Save a checkpoint, then commit the offsets it covers (dead letters sent first)."""
        if self._save():
            self.dead_letters.flush()
            self.source.commit(self.offsets)

    def _save(self) -> dict[int, int]:
        """Save a checkpoint (durable on return); the offsets it covers, none without one."""
        self._last_checkpoint_at = time.monotonic()
        if self.settings.checkpoint_dir is None:
            return {}
        metadata = {
            "source": self.source.name,
            "offsets": {str(p): o for p, o in self.offsets.items()},
            "consumed": self.consumed,
            "tick": self.tick,
            "last_id": self.last_id,
            "newest": None if self.newest == -math.inf else self.newest,
            "waiting": [[ts, items, basket_id] for ts, _, items, basket_id in sorted(self.waiting)],
            "recent": self.recent.state(),
            "counts": dict(self.counts),
        }
        with self._lock:  # a rebalance may ask for a checkpoint while a tick is running
            save_checkpoint(self.settings.checkpoint_dir, self.miner, metadata)
        return dict(self.offsets)

    def _restore(self) -> None:
        directory = self.settings.checkpoint_dir
        if directory is None or self.settings.start_fresh:
            return
        restored = load_checkpoint(
            directory, window=self.settings.window, policy=self.settings.policy, fresh_option="--start-fresh"
        )
        if restored is None:
            return
        self.miner, metadata = restored
        self.offsets = {int(p): o for p, o in metadata["offsets"].items()}
        self.consumed = metadata["consumed"]
        self.tick = metadata["tick"]
        self.last_id = metadata["last_id"]
        self.newest = -math.inf if metadata["newest"] is None else metadata["newest"]
        self.waiting = [
            (ts, next(self._arrivals), items, basket_id) for ts, items, basket_id in metadata["waiting"]
        ]
        heapq.heapify(self.waiting)
        self.recent = RecentIds.from_state(metadata["recent"])
        self.counts = Counter(metadata["counts"])
        print(
            f"stream-miner: resumed from {directory} at tick {self.tick}, {self.consumed} baskets consumed",
            file=self.log,
        )

    def _summarise(self) -> None:
        parts = [f"{self.consumed} baskets in the stream", f"{self.tick} ticks"]
        parts += [f"{n} {what}" for what, n in sorted(self.counts.items())]
        letters = self.dead_letters.counts
        if letters:
            parts.append("dead letters: " + ", ".join(f"{r} {n}" for r, n in sorted(letters.items())))
        print("stream-miner: " + "; ".join(parts), file=self.log)
