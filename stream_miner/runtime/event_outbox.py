"""Drift events written exactly once across restarts.

With checkpoints, a tick's events are held until the checkpoint holding the detector state
after that tick is durable; then they are written to the sink, made durable, and a note
beside the checkpoint (``events-note.json``) records that they are out and where the sink
stood. A restart reads both: events of the restored checkpoint that the note says are out are
not written again; otherwise a file sink is cut back to where it stood at the checkpoint and
the events are written now. A sink that cannot be cut back (Kafka) may see an event again
only if the process dies between writing it and the note (event ids are deterministic, so a
reader can drop the repeat). Without checkpoints events are written at once.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Protocol

from stream_miner.runtime.atomic_file import write_text_atomically

NOTE_NAME = "events-note.json"


class EventSink(Protocol):
    """Where drift events go: JSON-ready objects, written in order."""

    def write(self, event: dict) -> None:
        """Write one event."""

    def flush(self) -> None:
        """Make what was written durable."""

    def position(self) -> int | None:
        """Where the sink stands (a byte offset), None when it cannot be cut back."""

    def identity(self) -> str | None:
        """Which file the sink writes (None for one that cannot be cut back)."""

    def truncate(self, position: int | None, identity: str | None = None) -> None:
        """Cut the sink back to ``position``, measured on the file ``identity`` (never another
        one; nothing for a sink that cannot be cut back)."""

    def close(self) -> None:
        """Release the sink."""


class EventOutbox:
    """Holds events until the checkpoint that covers them is durable (``hold``)."""

    def __init__(self, sink: EventSink, *, hold: bool) -> None:
        self.sink = sink
        self.hold = hold
        self._held: list[dict] = []

    def write(self, events: list[dict]) -> None:
        """Take a tick's events: held, or written at once when nothing is held."""
        if self.hold:
            self._held.extend(events)
        elif events:
            for event in events:
                self.sink.write(event)
            self.sink.flush()

    def state(self) -> dict:
        """JSON-ready state for a checkpoint: the held events and where the sink stands."""
        return {"held": list(self._held), "written": self.sink.position(), "sink": self.sink.identity()}

    def release(self, directory: Path, sequence: int) -> int:
        """After checkpoint ``sequence`` is durable: write the held events, make them
        durable, and note it beside the checkpoint; return how many."""
        released, self._held = self._held, []
        if released:
            for event in released:
                self.sink.write(event)
            self.sink.flush()
            note = {"sequence": sequence, "written": self.sink.position(), "sink": self.sink.identity()}
            try:
                write_text_atomically(directory / NOTE_NAME, json.dumps(note))
            except OSError as error:  # a restart then cuts the file back and writes them again
                print(
                    f"stream-miner: warning: cannot write the events note in {directory} "
                    f"({error.strerror or error}); a restart writes these events again",
                    file=sys.stderr,
                )
        return len(released)

    def restore(self, state: dict, directory: Path, sequence: int) -> None:
        """Take back :meth:`state` output of checkpoint ``sequence``: events the note says are
        out stay out (the sink is cut back to the end of them); otherwise the sink is cut
        back to where it stood at the checkpoint and the events stay held, for the next
        release."""
        out, position, identity = _read_note(directory, sequence)
        if out:
            self._held = []
            self.sink.truncate(position, identity)
        else:
            self._held = list(state["held"])
            self.sink.truncate(state["written"], state.get("sink"))


def _read_note(directory: Path, sequence: int) -> tuple[bool, int | None, str | None]:
    """Whether the events of checkpoint ``sequence`` are out, where the sink stood after
    them (None for a sink without positions) and which file it was. A missing or unreadable
    note: not out."""
    try:
        note = json.loads((directory / NOTE_NAME).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False, None, None
    if not isinstance(note, dict) or note.get("sequence") != sequence:
        return False, None, None
    written, sink = note.get("written"), note.get("sink")
    return True, written if isinstance(written, int) else None, sink if isinstance(sink, str) else None
