"""The aggregator of a scale-out run: turns the members' parts of a tick into the global
tick, on a thread of whichever member the election names.

For each tick (oldest first) it waits, at most ``--tick-wait``, for parts from members
whose partitions cover the source topic exactly once (a newer group generation wins a
clash); asks every member of that cover to count the union of their itemsets (phase 2 of
:mod:`stream_miner.cluster.merge`) and sums the answers into the global result, rules and
delta; runs the drift detector on it, asking the members again for any count the detector
needs (window counts of watched patterns that left the result, counts over past windows);
then publishes the close of the tick, which carries the aggregator's whole state and the
tick's events, and only then writes the snapshot, tells the listeners, and writes the
events followed by a delivery record. A tick whose parts or answers do not all come in
time is closed as incomplete, with what was missing, and publishes nothing else.

A newly elected aggregator reads the topic to its end, takes the state from the newest
close, and writes that tick's events again if no delivery record follows them (a file sink
is first cut back to where the last delivery left it), so a failover neither repeats nor
loses a tick.
"""

from __future__ import annotations

import copy
import math
import sys
import threading
import time
import uuid
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import TextIO, cast

from stream_miner.cluster.merge import (
    Names,
    candidates,
    decode_itemsets,
    encode_itemsets,
    global_result,
    totals,
)
from stream_miner.cluster.wire import ASK, CLOSE, DELIVERED, CoordinationTopic, Message
from stream_miner.drift.detector import DriftDetector, WindowView
from stream_miner.drift.events import WindowInfo
from stream_miner.drift.settings import DriftSettings
from stream_miner.engine.delta import diff_results
from stream_miner.engine.miner import Tick
from stream_miner.engine.params import MiningParams
from stream_miner.engine.result import MiningResult
from stream_miner.runtime.event_outbox import EventSink
from stream_miner.runtime.protocols import StoppedWaiting, TickListener, TickReport

SYNC_TIMEOUT = 30.0  # seconds a new aggregator waits to read the topic to its end


class Incomplete(Exception):
    """A tick could not be completed; the message says what was missing."""


@dataclass(frozen=True)
class Shape:
    """What every tick has in common: the window's length, the tick interval, how long to
    wait for the members, and how many partitions the source topic has."""

    window: float
    interval: float
    wait: float
    partitions: int


class Aggregator:
    """Runs the global ticks while this member is elected (see the module's description)."""

    def __init__(
        self,
        topic: CoordinationTopic,
        name: str,
        params: MiningParams,
        shape: Shape,
        *,
        drift: DriftSettings | None,
        listeners: Sequence[TickListener],
        events: EventSink | None,
        log: TextIO = sys.stderr,
    ) -> None:
        self.topic, self.name, self.params, self.shape = topic, name, params, shape
        self.drift = drift
        self.listeners = list(listeners)
        self.events = events
        self.log = log
        self.incomplete = 0  # ticks this process closed as incomplete
        self._detector: DriftDetector | None = None
        self._last: MiningResult | None = None
        self._earliest = math.inf
        self._loaded = False
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="stream-miner-aggregator", daemon=True)

    def drift_totals(self) -> tuple[int, int]:
        """Patterns emerged and faded so far, as the newest state this member holds has them."""
        detector = self._detector
        return (0, 0) if detector is None else (detector.emerged_total, detector.faded_total)

    def start(self) -> None:
        self._thread.start()

    def stop(self) -> None:
        self._stop.set()
        self._thread.join(timeout=5.0)

    # --------------------------------------------------------------- the loop
    def _run(self) -> None:
        board = self.topic.board
        while not self._stop.is_set():
            if not self.topic.election.elected:
                self._loaded = False
                self._stop.wait(0.1)
                continue
            try:
                if not self._loaded:
                    self._take_over()
                next_tick = self._next_tick()
                if next_tick is None:
                    board.wait(lambda: self._next_tick() is not None, 0.2, self._stop)
                    continue
                self._aggregate(next_tick)
            except StoppedWaiting:
                return
            except Exception as error:  # one line, never a traceback from this thread
                self._fail(error)

    def _fail(self, error: Exception) -> None:
        """An unexpected error: say it in one line and close the open tick as incomplete."""
        tick = self._next_tick()
        print(f"stream-miner: error: aggregating: {type(error).__name__}: {error}", file=self.log, flush=True)
        if tick is not None:
            self._close(
                tick, {"complete": False, "missing": f"the aggregator failed ({type(error).__name__})"}
            )
            self.incomplete += 1

    def _next_tick(self) -> float | None:
        board = self.topic.board
        return min((t for t in board.parts if t > board.last_closed), default=None)

    def _take_over(self) -> None:
        """Read the topic to its end; carry on from the newest state; deliver its events if
        no delivery record follows them."""
        if not self.topic.sync(SYNC_TIMEOUT):
            return
        board = self.topic.board
        with board.changed:
            state, delivered = board.state, board.delivered
        self._restore(state)
        if (
            state is not None
            and state.get("events")
            and (delivered is None or delivered["tick"] < state["tick"])
        ):
            if delivered is not None and self.events is not None:
                self.events.truncate(delivered.get("position"), delivered.get("identity"))
            self._deliver(float(state["tick"]), state["events"])
        self._loaded = True

    def _restore(self, state: dict | None) -> None:
        if state is None:
            self._detector = None if self.drift is None else DriftDetector(self.drift)
            self._last, self._earliest = None, math.inf
            return
        saved = state["state"]
        result = saved["result"]
        itemsets = decode_itemsets(result["itemsets"])
        self._last = global_result(int(result["n"]), itemsets, self.params)
        self._earliest = math.inf if saved["earliest"] is None else float(saved["earliest"])
        if self.drift is not None:
            detector = saved.get("detector")
            self._detector = (
                DriftDetector(self.drift)
                if detector is None
                else DriftDetector.restored(detector, self.drift)
            )

    # ---------------------------------------------------------------- a tick
    def _aggregate(self, tick: float) -> None:
        started = time.perf_counter()
        try:
            cover = self._cover(tick)
            parts = {member: self.topic.board.parts[tick][member] for member in cover}
            local = [decode_itemsets(body["itemsets"]) for body in parts.values()]
            asked = candidates(local)
            answers = self._ask(tick, 0, cover, [{"span": None, "itemsets": [list(x) for x in asked]}])
            n = sum(int(body["n"]) for body in parts.values())
            result = global_result(n, totals(asked, [a[0] for a in answers]), self.params)
            for body in parts.values():
                if body["earliest"] is not None:
                    self._earliest = min(self._earliest, float(body["earliest"]))
            number = round(tick / self.shape.interval)
            report = TickReport(
                Tick(number, result, diff_results(self._last, result)),
                sum(int(body["consumed"]) for body in parts.values()),
                None,
                tick - self.shape.window,
                tick,
                0.0,
                0.0,
            )
            detector, report, keep = self._detect(tick, cover, report)
        except Incomplete as missing:
            self._close(tick, {"complete": False, "missing": str(missing)})
            self.incomplete += 1
            print(
                f"stream-miner: tick at {tick:g} incomplete: {missing}; nothing published for it",
                file=self.log,
                flush=True,
            )
            return
        events = [event.as_json() for event in report.events]
        state = {
            "result": {"n": result.n_baskets, "itemsets": encode_itemsets(result.itemsets)},
            "earliest": None if self._earliest == math.inf else self._earliest,
            "detector": None if detector is None else detector.state(),
        }
        body = {"complete": True, "number": number, "keep_past": keep, "state": state, "events": events}
        if not self._close(tick, body):
            self._loaded = False  # another aggregator closed it: carry on from the state it published
            return
        self._detector, self._last = detector, result
        report = replace(report, refresh_seconds=time.perf_counter() - started)
        for listener in self.listeners:
            listener.on_tick(report)
        self._deliver(tick, events)

    def _cover(self, tick: float) -> list[str]:
        """Members whose parts of ``tick`` cover every partition exactly once (the newest
        generation first), waiting for them up to ``--tick-wait``."""
        board = self.topic.board
        found: list[str] = []

        def covered() -> bool:
            chosen = self._disjoint_cover(board.parts.get(tick, {}))
            if chosen is not None:
                found[:] = chosen
                return True
            # the group moved on without it: a later tick is covered already (members that
            # started after this tick never take part in it), or came from a newer generation
            parts = board.parts.get(tick, {})
            newest = max((int(b["generation"]) for b in parts.values()), default=-1)
            return any(
                self._disjoint_cover(p) is not None or any(int(b["generation"]) > newest for b in p.values())
                for t, p in board.parts.items()
                if t > tick
            )

        board.wait(covered, self.shape.wait, self._stop)
        if not found:
            with board.changed:
                parts = board.parts.get(tick, {})
                seen = {int(p) for body in parts.values() for p in body["partitions"]}
            missing = sorted(set(range(self.shape.partitions)) - seen)
            raise Incomplete(
                f"partitions {', '.join(map(str, missing))} did not report"
                if missing
                else "members' parts overlap"
            )
        return found

    def _disjoint_cover(self, parts: dict[str, dict]) -> list[str] | None:
        """Members whose parts name every partition exactly once (newest generation first);
        None when there are none such."""
        chosen: list[str] = []
        seen: set[int] = set()
        for member, body in sorted(parts.items(), key=lambda kv: -int(kv[1]["generation"])):
            mine = {int(p) for p in body["partitions"]}
            if not mine or mine & seen:
                continue
            chosen.append(member)
            seen |= mine
        return chosen if seen == set(range(self.shape.partitions)) else None

    def _ask(
        self, tick: float, round_: int, members: list[str], questions: list[dict]
    ) -> list[list[list[int]]]:
        """Ask ``members`` the ``questions`` (itemsets to count in the window, or in a past
        span); their answers in the order of ``members``."""
        board = self.topic.board
        self.topic.send(
            Message(ASK, tick, self.name, {"round": round_, "members": members, "questions": questions})
        )
        key = (tick, round_)

        def answered() -> bool:
            return all(m in board.answers.get(key, {}) for m in members)

        if not board.wait(answered, self.shape.wait, self._stop):
            with board.changed:
                missing = [m for m in members if m not in board.answers.get(key, {})]
            raise Incomplete(f"no answer from {', '.join(missing)}")
        with board.changed:
            return [board.answers[key][m]["counts"] for m in members]

    def _detect(
        self, tick: float, members: list[str], report: TickReport
    ) -> tuple[DriftDetector | None, TickReport, list | None]:
        """Run the detector on a copy until it asks for no count it has not got: each round
        asks the members for the missing counts. The detector after the tick, the report
        with its events, and the past span the members keep."""
        if self._detector is None:
            return None, report, None
        result = report.tick.result
        if not result.n_baskets:
            return self._detector, report, self._keep(self._detector)
        start = tick - self.shape.window
        full = tick - self._earliest >= self.shape.window
        view = WindowView(start, tick, full, WindowInfo(result.n_baskets, None, None, tick))
        known: dict[tuple[object, Names], int] = {}
        for round_ in range(1, 100):
            trial = copy.deepcopy(self._detector)
            missing: dict[object, set[Names]] = {}

            def look(span: object, itemsets: Sequence[Names]) -> list[int]:
                for items in itemsets:
                    if (span, tuple(items)) not in known:
                        missing.setdefault(span, set()).add(tuple(items))  # noqa: B023 - used in this round
                return [known.get((span, tuple(items)), 0) for items in itemsets]

            events = trial.update(
                report.tick,
                view,
                lambda itemsets: look(None, itemsets),
                lambda itemsets, low, high: look((low, high), itemsets),
            )
            if not missing:
                patterns = trial.patterns()
                done = replace(report, events=tuple(events), patterns=tuple(patterns))
                return trial, done, self._keep(trial)
            spans = list(missing)
            asked = [sorted(missing[span]) for span in spans]
            questions = [
                {"span": None if span is None else _span_json(span), "itemsets": [list(x) for x in itemsets]}
                for span, itemsets in zip(spans, asked, strict=True)
            ]
            answers = self._ask(tick, round_, members, questions)
            for index, (span, itemsets) in enumerate(zip(spans, asked, strict=True)):
                summed = totals(itemsets, [member[index] for member in answers])
                known.update({(span, items): count for items, count in summed.items()})
        raise Incomplete("the drift detector kept asking for counts")

    @staticmethod
    def _keep(detector: DriftDetector) -> list | None:
        needed = detector.past_needed()
        return None if needed is None else _span_json(needed)

    def _close(self, tick: float, body: dict) -> bool:
        """Publish the close of ``tick``, unless this member is no longer elected or the tick
        was closed already; whether this close is the one that counts (the first on the
        topic: a deposed aggregator may have closed it too)."""
        board = self.topic.board
        if not self.topic.election.elected or tick <= board.last_closed:
            return False
        mark = uuid.uuid4().hex
        self.topic.send(Message(CLOSE, tick, self.name, {**body, "mark": mark}))
        board.wait(lambda: board.last_closed >= tick, SYNC_TIMEOUT, self._stop)
        with board.changed:
            return board.closed.get(tick, {}).get("mark") == mark

    def _deliver(self, tick: float, events: list[dict]) -> None:
        """Write ``events`` to the sink, then record that they are out and where it stands."""
        if self.events is None or not events:
            return
        for event in events:
            self.events.write(event)
        self.events.flush()
        position, identity = self.events.position(), self.events.identity()
        self.topic.send(
            Message(DELIVERED, tick, self.name, {"tick": tick, "position": position, "identity": identity})
        )


def _span_json(span: object) -> list:
    """A past span as JSON: [low, high], high None for no end."""
    low, high = cast(tuple[float, float], span)
    return [low, None if high == math.inf else high]
