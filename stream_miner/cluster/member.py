"""One member of a scale-out run: its partitions' window, ticked at shared event-time
boundaries, answering the aggregator about it.

- **Boundaries.** Ticks fall on multiples of the tick interval in event time. The member's
  watermark is the newest event time of the partitions it still has records to read from
  (the newest of all when it has read everything), less the allowed lateness; once that
  passes a boundary T and nothing read waits unprocessed, every basket with a time up to T
  is in, so the window holds exactly (T - length, T] of its partitions. Baskets after T wait
  until T's tick is done. A member whose partitions are all read to their end follows the
  group: it ticks at a boundary another member reported.
- **A tick.** The member mines its window at its share of the threshold (phase 1 of
  :mod:`stream_miner.cluster.merge`), writes the dead letters read so far, publishes its
  part (its itemsets, window size and, per partition, the offset its window starts at and
  the offset it read to), then answers the aggregator's questions about this window until
  the tick is closed, the group's membership changes, or ``3 x --tick-wait`` passes. Ticks
  the group closed already (a member rebuilding its window) are skipped.
- **Handovers without shared disks.** After each tick the member commits, per partition,
  the offset its window starts at (further back while the drift detector may count past
  baskets), not the offset it read to. A member given a partition reads it from that
  offset and so rebuilds the partition's window from the topic; dead letters below the
  offset the previous owner had read to are its, and are not written again. A partition
  taken away is withdrawn from the window at once.
"""

from __future__ import annotations

import math
import os
import socket
import time
import uuid
from collections.abc import Sequence
from dataclasses import replace
from typing import TYPE_CHECKING

from stream_miner.cluster.merge import encode_itemsets, local_params
from stream_miner.cluster.wire import ANSWER, PART, CoordinationTopic, Message
from stream_miner.connectors.kafka_source import KafkaSource
from stream_miner.decoding.records import Basket, DeadLetter
from stream_miner.engine.limits import MiningInterrupted
from stream_miner.engine.window import TimeWindow
from stream_miner.runtime.health import DeadLetterWatch
from stream_miner.runtime.outbox import DeadLetterOutbox
from stream_miner.runtime.protocols import DeadLetterSink
from stream_miner.runtime.runner import OFFSET_BITS, RunFigures, Runner, RunSettings

if TYPE_CHECKING:
    from stream_miner.cluster.aggregator import Aggregator

MEMBER_WAIT = 3  # a member waits at most this many --tick-wait for its tick to be closed
SYNC_TIMEOUT = 10.0  # seconds a member waits to read the coordination topic to its end
QUIET_POLLS = 2  # polls in a row bringing nothing before a member that read all follows the group


def member_name() -> str:
    """A name for this process in the group's messages: host, process id and a random part."""
    return f"{socket.gethostname()}-{os.getpid()}-{uuid.uuid4().hex[:6]}"


class MemberRunner(Runner):
    """The run loop of one member (see the module's description)."""

    def __init__(
        self,
        settings: RunSettings,
        source: KafkaSource,
        dead_letters: DeadLetterSink,
        topic: CoordinationTopic,
        *,
        interval: float,
        tick_wait: float,
        name: str,
        keep_past: bool,
    ) -> None:
        if not isinstance(settings.window, TimeWindow):
            raise ValueError("a run over several processes needs an event-time window (--window-time)")
        self.local = local_params(settings.params)
        super().__init__(
            replace(settings, tick_every=None, tick_interval=None, checkpoint_dir=None, drift=None),
            source,
            dead_letters,
            tick_on_stop=False,
        )
        self.kafka = source
        self.aggregator: Aggregator | None = None  # this process's aggregator (for the metrics)
        source.pause_while_busy = (
            False  # paused partitions can stall kafka-python's fetcher after a rebalance
        )
        self.topic = topic
        self.name = name
        self.interval = interval
        self.tick_wait = tick_wait
        self.window_length = settings.window.seconds
        self.dead_letters = DeadLetterOutbox(dead_letters, hold=True)
        self.watch = DeadLetterWatch(self.dead_letters.counts, self.log)
        self.boundary: float | None = None  # the next tick's event time
        self._acquired: set[int] = set()  # partitions taken over since the board was last read to its end
        self._publish_after = -math.inf  # a partition taken over is exact after its last owner's tick
        self._quiet_polls = 0  # polls in a row that brought nothing (the log's end is known afresh)
        self._taken_at_poll = 0  # records taken up to the last poll
        self._newest_at: dict[int, float] = {}  # per partition: the newest event time read
        self._next: dict[int, int] = {}  # per partition: the next offset to take
        self._reading_from: dict[int, int] = {}  # per partition given to this member: its first offset
        self._written_below: dict[int, int] = {}  # per partition: its previous owner wrote these dead letters
        self._starts: dict[float, dict[int, int]] = {}  # per tick: where each partition's window starts
        self._committable: dict[int, int] = {}  # where a next owner rebuilds each partition from
        self._keep_from: float | None = -math.inf if keep_past else None  # past kept for the detector
        if keep_past:
            self.miner.keep_past(-math.inf, math.inf)

    def figures(self) -> RunFigures:
        """The loop's counts, with the aggregator's: its drift totals, whether it is elected
        now, and the ticks it closed as incomplete."""
        figures = super().figures()
        aggregator = self.aggregator
        if aggregator is None:
            return figures
        emerged, faded = aggregator.drift_totals()
        return replace(
            figures,
            emerged=emerged,
            faded=faded,
            aggregating=self.topic.election.elected,
            incomplete=aggregator.incomplete,
        )

    # ----------------------------------------------------------------- records
    def _take(self, payload: Basket | DeadLetter, partition: int, offset: int) -> None:
        self._next[partition] = offset + 1
        if isinstance(payload, DeadLetter) and offset < self._written_below.get(partition, -1):
            return  # read again while rebuilding: its previous owner wrote it
        super()._take(payload, partition, offset)

    def _refuse(self, basket: Basket, reason: str, detail: str, partition: int, offset: int) -> None:
        if offset >= self._written_below.get(partition, -1):
            super()._refuse(basket, reason, detail, partition, offset)

    def _watermark_after(self, partition: int, ts: float) -> float:
        self._newest_at[partition] = max(ts, self._newest_at.get(partition, -math.inf))
        if self.boundary is None:
            self.boundary = math.ceil(ts / self.interval) * self.interval
        return self._watermark()

    def _watermark(self, behind: list[int] | None = None) -> float:
        """The newest event time of the partitions with records still to take (``behind``;
        by default judged by the log's ends the last fetch saw), of all when none has, less
        the lateness: no basket taken later is older, beyond that lateness."""
        bound = self.newest
        for partition in self._behind(self.kafka.highwaters()) if behind is None else behind:
            bound = min(bound, self._newest_at.get(partition, -math.inf))
        return bound - self.settings.allowed_lateness

    def _behind(self, ends: dict[int, int]) -> list[int]:
        """Assigned partitions with records not yet taken before the log's ``ends`` (or
        whose end is not known)."""
        return [
            p
            for p in self.kafka.assigned()
            if p not in ends or self._next.get(p, self._reading_from.get(p, 0)) < ends[p]
        ]

    def _release(self, watermark: float) -> None:
        """Let waiting baskets in up to the watermark, but none after the next boundary."""
        capped = watermark if self.boundary is None else min(watermark, self.boundary)
        if capped > -math.inf:  # -inf: a partition not read from yet holds everything back
            super()._release(capped)

    # ------------------------------------------------------------------- ticks
    def _due_after_record(self) -> bool:
        return False  # a boundary is judged once a whole poll's records are in

    def _due_after_poll(self) -> bool:
        self._quiet_polls = self._quiet_polls + 1 if self._taken_at_poll == self.watch.records else 0
        self._taken_at_poll = self.watch.records
        return self._boundary_due()

    def _boundary_due(self) -> bool:
        """Whether every basket up to the next boundary is in the window or waiting: judged
        first by the log's ends the last fetch saw, then (when that says yes) by the ends the
        broker gives now, since a fetch's view can be older than records already written."""
        if self.kafka.has_backlog() or not self._due_by(self.kafka.highwaters()):
            return False
        ends = self.kafka.end_offsets()
        return ends is not None and self._due_by(ends, settle=True)

    def _due_by(self, ends: dict[int, int], *, settle: bool = False) -> bool:
        """:meth:`_boundary_due` with the log's ends ``ends``; ``settle`` keeps the boundary
        it chose. A member that has read everything follows the group to a boundary another
        member reported; one that never had a basket joins the oldest tick still open; one
        that has not ticked yet joins an earlier open tick while nothing after it entered its
        window (members starting at different boundaries would leave it incomplete)."""
        behind = self._behind(ends)
        read_all = self._quiet_polls >= QUIET_POLLS and bool(self.kafka.assigned()) and not behind
        board = self.topic.board
        with board.changed:
            open_ticks = sorted(t for t in board.parts if t > board.last_closed)
        boundary = self.boundary
        if boundary is None:
            if not (read_all and open_ticks):
                return False
            boundary = open_ticks[0]
        elif (
            not self.schedule.ticks
            and open_ticks
            and open_ticks[0] < boundary
            and self.watermark <= open_ticks[0]
        ):
            boundary = open_ticks[0]
        if settle:
            self.boundary = boundary
        if self._watermark(behind) > boundary:
            return True
        return read_all and self._newest_tick_said() >= boundary

    def _tick(self) -> None:
        while self.boundary is not None and not self.stopping and self._boundary_due():
            tick = self.boundary
            with self._lock:
                Runner._release(self, tick)
                self.miner.advance_time(tick)
            if self._acquired:
                self._catch_up_on_board()
            if tick > max(self.topic.board.last_closed, self._publish_after):
                self._on_worker(lambda: self._take_part(tick))  # noqa: B023 - run before the loop goes on
            self.schedule.ticked(self.consumed)
            self.boundary = tick + self.interval
            self._quiet_polls = 0  # what is known of the log's end is from before the tick
            self._withdraw()
        self._checkpoint()

    def _catch_up_on_board(self) -> None:
        """After taking partitions over: read the coordination topic to its end, then take
        from it the newest tick their previous owners took part in (no part before it: the
        committed rebuild point is exact only from there) and the offsets they had read to
        (their dead letters below are out already). The board read at the handover may lag."""
        if not self.topic.sync(SYNC_TIMEOUT):
            return  # tried again at the next tick
        board = self.topic.board
        with board.changed:
            claimed = {p: board.claimed.get(p, -math.inf) for p in self._acquired}
            read_to = {p: board.read_to.get(p, -1) for p in self._acquired}
        self._publish_after = max(self._publish_after, *claimed.values())
        for partition, offset in read_to.items():
            self._written_below[partition] = max(offset, self._written_below.get(partition, -1))
        self.dead_letters.release(read_to, write=False)  # held, but written by the previous owner
        self._acquired = set()

    def _take_part(self, tick: float) -> None:
        """Phase 1 for ``tick``, then the answers to the aggregator until the tick is closed
        (on the worker thread; the window does not change meanwhile)."""
        generation = self.kafka.generation()
        local = self.miner.tick(self.local, refresh=self.settings.refresh, interrupt=self.interrupt)
        starts = self._window_starts()
        self._starts[tick] = starts
        reading = {p: self._next.get(p, self._reading_from.get(p, 0)) for p in self.kafka.assigned()}
        self.dead_letters.release(reading)
        body = {
            "generation": generation,
            "n": local.result.n_baskets,
            "consumed": self.consumed,
            "earliest": None if self.earliest == math.inf else self.earliest,
            "partitions": {str(p): [starts.get(p, o), o] for p, o in reading.items()},
            "itemsets": encode_itemsets(local.result.itemsets),
        }
        self.topic.send(Message(PART, tick, self.name, body))
        self._answer_until_closed(tick, generation)
        self._committable = self._rebuild_points(starts)

    def _window_starts(self) -> dict[int, int]:
        """Per partition read: the lowest offset in the window or waiting, else the next one."""
        lowest = {p: tag & ((1 << OFFSET_BITS) - 1) for p, tag in self.miner.lowest_tags(OFFSET_BITS).items()}
        for _, _, _, partition, offset in self.waiting:
            lowest[partition] = min(offset, lowest.get(partition, offset))
        return {p: min(lowest.get(p, o), o) for p, o in self._next.items()}

    def _answer_until_closed(self, tick: float, generation: int) -> None:
        board = self.topic.board
        answered = 0
        deadline = time.monotonic() + MEMBER_WAIT * self.tick_wait
        while True:
            board.wait(
                lambda: board.last_closed >= tick or len(board.asks.get(tick, ())) > answered,  # noqa: B023
                max(0.0, min(0.2, deadline - time.monotonic())),
                self.interrupt,
            )
            if self.interrupt.is_set():
                raise MiningInterrupted("stopped while the group's tick was open")
            with board.changed:
                closed = board.closed.get(tick)
                asks = list(board.asks.get(tick, ()))[answered:]
            for ask in asks:
                if self.name in ask["members"]:
                    counts = [self._count(question) for question in ask["questions"]]
                    self.topic.send(
                        Message(ANSWER, tick, self.name, {"round": ask["round"], "counts": counts})
                    )
                    deadline = time.monotonic() + MEMBER_WAIT * self.tick_wait  # the aggregator is at work
                answered += 1
            if closed is not None:
                self._keep_past(closed.get("keep_past"))
                return
            if board.last_closed > tick:  # the group closed a later tick: this one is given up
                return
            if asks:
                continue
            if time.monotonic() >= deadline or self.kafka.generation() != generation:
                return

    def _count(self, question: dict) -> list[int]:
        itemsets: Sequence[Sequence[str]] = question["itemsets"]
        span = question["span"]
        if span is None:
            return self.miner.count(itemsets)
        low, high = span
        return self.miner.count_past(itemsets, float(low), math.inf if high is None else float(high))

    def _keep_past(self, span: list | None) -> None:
        """Keep the past baskets the aggregator's detector may still count (none: drop them)."""
        if self._keep_from is None:
            return
        if span is None:
            self.miner.stop_keeping_past()
            self._keep_from = math.inf
        else:
            low, high = span
            self.miner.keep_past(float(low), math.inf if high is None else float(high))
            self._keep_from = float(low)

    def _rebuild_points(self, starts: dict[int, int]) -> dict[int, int]:
        """Where a next owner reads each partition from: the window's start, or further back
        the start of the earliest recorded window that holds every past basket still kept."""
        keep_from = self._keep_from if self._keep_from is not None else math.inf
        reaching = [t for t in self._starts if t - self.window_length <= keep_from]
        oldest = max(reaching) if reaching else min(self._starts)
        self._starts = {t: s for t, s in self._starts.items() if t >= oldest}
        points = dict(starts)
        for partition in points:
            recorded = self._starts[oldest].get(partition)
            if recorded is not None:
                points[partition] = min(points[partition], recorded)
        return points

    def _newest_tick_said(self) -> float:
        """The newest tick any member published a part of, or the group closed."""
        board = self.topic.board
        with board.changed:
            return max(board.last_closed, max(board.parts, default=-math.inf))

    # -------------------------------------------------------------- handovers
    def _checkpoint(self, *, final: bool = False) -> None:
        """Commit where a next owner of each partition rebuilds its window from."""
        self._last_checkpoint_at = time.monotonic()
        points = self.before_revoke()
        if points:
            self.source.commit(points)

    def before_revoke(self) -> dict[int, int]:
        """The rebuild points of the partitions this member reads (committed on revoke too)."""
        return {p: o for p, o in self._committable.items() if p in self._next}

    def after_commit(self, positions: dict[int, int], outcome: object) -> None:
        """Nothing to record: the coordination topic and the group hold a member's progress."""

    def held_partitions(self) -> set[int]:
        return set(self._next)

    def on_assigned(self, committed: dict[int, int | None], assigned: set[int]) -> dict[int, int | None]:
        """Withdraw partitions taken away; read kept ones on, new ones from the offset the
        group committed (rebuilding their window)."""
        starts: dict[int, int | None] = {}
        with self._lock:
            for partition in sorted(set(self._next) - assigned):
                self._give_back(partition, 0)
                held_maps = (
                    self._next,
                    self._newest_at,
                    self._committable,
                    self._written_below,
                    self._reading_from,
                )
                for held in held_maps:
                    held.pop(partition, None)
                self._acquired.discard(partition)
            for partition in assigned:
                if partition in self._next:
                    starts[partition] = self._next[partition]
                    continue
                start = starts[partition] = committed.get(partition)
                claimed = self.topic.board.claimed.get(partition, -math.inf)  # its last owner's tick
                self._publish_after = max(self._publish_after, claimed)
                self._acquired.add(partition)  # looked up again once the board is read to its end
                if start is not None:
                    self._reading_from[partition] = start
                self._written_below[partition] = self.topic.board.read_to.get(partition, -1)
        return starts
