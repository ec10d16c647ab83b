"""Dead letters held back until the group has the offsets they were read at on record.

A dead letter read at a partition offset that a handover later gives back is read again by
the partition's next owner, which writes it. So, when the source shares its partitions with
other group members, letters wait here until a commit covering their offsets is acknowledged
(:meth:`DeadLetterOutbox.release`), and letters beyond a handover boundary are dropped
(:meth:`DeadLetterOutbox.give_back`). Then every bad record is written by exactly one member.
Counts by reason cover every letter taken and not given back (``given_back`` counts the
rest, so the two together only grow), and survive restarts with the held letters
(:meth:`DeadLetterOutbox.state`). With ``hold=False`` (no checkpoints, or a
source nobody else reads) letters go straight to the sink.
"""

from __future__ import annotations

import base64
from collections import Counter

from stream_miner.decoding.records import DeadLetter
from stream_miner.runtime.protocols import DeadLetterSink


class DeadLetterOutbox:
    """Wraps a dead-letter sink; a :class:`~stream_miner.runtime.protocols.DeadLetterSink` itself."""

    def __init__(self, sink: DeadLetterSink, *, hold: bool) -> None:
        self.sink = sink
        self.hold = hold
        self.counts: Counter[str] = Counter()
        self.given_back: Counter[str] = Counter()
        self._held: list[DeadLetter] = []

    def write(self, letter: DeadLetter) -> None:
        """Take ``letter``: held back, or written at once when nothing is held back."""
        self.counts[letter.reason] += 1
        if self.hold:
            self._held.append(letter)
        else:
            self.sink.write(letter)

    def release(self, landed: dict[int, int], *, write: bool = True) -> int:
        """Write every held letter whose offset lies below its partition's ``landed`` offset,
        in the order taken, and make them durable (``write=False``: they are out already,
        only stop holding them); return how many."""
        due = [letter for letter in self._held if _below(letter, landed)]
        if due:
            self._held = [letter for letter in self._held if not _below(letter, landed)]
            if write:
                for letter in due:
                    self.sink.write(letter)
                self.sink.flush()
        return len(due)

    def give_back(self, partition: int, boundary: int) -> None:
        """Drop held letters of ``partition`` at or beyond ``boundary`` (the next owner of the
        partition writes them) and move them from ``counts`` to ``given_back``."""
        dropped = [x for x in self._held if x.partition == partition and (x.offset or 0) >= boundary]
        if dropped:
            self._held = [x for x in self._held if x not in dropped]
            for letter in dropped:
                self.counts[letter.reason] -= 1
                self.given_back[letter.reason] += 1
                if not self.counts[letter.reason]:
                    del self.counts[letter.reason]

    def flush(self) -> None:
        """Make what was written to the sink durable."""
        self.sink.flush()

    def close(self) -> None:
        """Close the sink (held letters stay in the last checkpoint)."""
        self.sink.close()

    # ------------------------------------------------------------- persistence
    def state(self) -> dict:
        """JSON-ready state for a checkpoint: counts, held letters, where the sink stands."""
        return {
            "counts": dict(self.counts),
            "given_back": dict(self.given_back),
            "held": [_letter_state(letter) for letter in self._held],
            "written": self.sink.position(),
            "sink": self.sink.identity(),
        }

    def restore(self, state: dict, written: int | None = None) -> None:
        """Take back :meth:`state` output; the sink is cut back to ``written`` (default: where
        it stood in that state), dropping what was written after it."""
        self.counts.clear()
        self.counts.update(state["counts"])  # in place: watchers hold this counter
        self.given_back = Counter(state.get("given_back", {}))  # checkpoints before 0.3 did not keep it
        self._held = [_letter_from(entry) for entry in state["held"]]
        self.sink.truncate(state["written"] if written is None else written, state.get("sink"))


def _below(letter: DeadLetter, landed: dict[int, int]) -> bool:
    return (letter.offset or 0) < landed.get(letter.partition or 0, -1)


def _letter_state(letter: DeadLetter) -> list:
    raw = base64.b64encode(letter.raw).decode("ascii")
    return [raw, letter.reason, letter.detail, letter.source, letter.partition, letter.offset]


def _letter_from(entry: list) -> DeadLetter:
    raw, reason, detail, source, partition, offset = entry
    return DeadLetter(base64.b64decode(raw), reason, detail, source, partition, offset)
