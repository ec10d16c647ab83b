"""A small note beside the checkpoint: what became of the commit that followed it.

A checkpoint is saved before its offsets are committed, so it cannot say whether that
commit landed. The note (``commit-note.json``, replaced atomically) records it as soon as it
is known: the checkpoint's sequence number, the offsets committed (those of the partitions the
member owned), the outcome, and where the dead-letter sink stood after the letters the commit
released were written. A restart reads it to know which of the
checkpoint's baskets are the member's for good and which dead letters are already out.
"""

from __future__ import annotations

import json
from pathlib import Path

from stream_miner.runtime.atomic_file import write_text_atomically
from stream_miner.runtime.ledger import CommitOutcome

NOTE_NAME = "commit-note.json"


def write_note(
    directory: Path, sequence: int, positions: dict[int, int], outcome: CommitOutcome, written: int | None
) -> None:
    """Record that the commit of ``positions`` after checkpoint ``sequence`` had ``outcome``;
    the dead-letter sink then stood at ``written``."""
    note = {
        "sequence": sequence,
        "positions": {str(p): o for p, o in positions.items()},
        "outcome": outcome.value,
        "written": written,
    }
    write_text_atomically(directory / NOTE_NAME, json.dumps(note))


def read_note(directory: Path, sequence: int) -> tuple[dict[int, int], CommitOutcome, int | None] | None:
    """The positions, outcome and sink position noted for checkpoint ``sequence``; None when
    the note is missing, unreadable or about another checkpoint (the outcome is unknown)."""
    try:
        note = json.loads((directory / NOTE_NAME).read_text(encoding="utf-8"))
        if note["sequence"] != sequence:
            return None
        positions = {int(p): int(o) for p, o in note["positions"].items()}
        written = note["written"]
        return positions, CommitOutcome(note["outcome"]), None if written is None else int(written)
    except (OSError, ValueError, KeyError, TypeError, AttributeError):
        return None
