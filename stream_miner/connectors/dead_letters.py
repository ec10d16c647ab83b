"""Dead-letter sinks: where messages that are not baskets go, counted by reason.

:class:`DeadLetterFile` appends one JSON object per dead letter to a JSON Lines file::

    {"key", "reason", "detail", "source", "partition", "offset", "raw_base64", "raw_text"}

``key`` is the record's deterministic id (``SOURCE/PARTITION/OFFSET``); ``raw_base64`` holds
the full raw bytes; ``raw_text`` is a readable preview (UTF-8 with
replacement characters, at most 1000 characters). :class:`DeadLetterCounter` only counts.
"""

from __future__ import annotations

import base64
import os
from collections import Counter
from typing import Self

from stream_miner.connectors.json_lines import JsonLinesFile
from stream_miner.decoding.records import DeadLetter
from stream_miner.runtime.protocols import CannotCutBack

RAW_TEXT_LIMIT = 1000


class DeadLetterCounter(CannotCutBack):
    """Counts dead letters by reason and keeps nothing else (for bad input the user drops)."""

    def __init__(self) -> None:
        self.counts: Counter[str] = Counter()

    def write(self, letter: DeadLetter) -> None:
        """Count ``letter`` under its reason."""
        self.counts[letter.reason] += 1

    def flush(self) -> None:
        """Make what was written durable (each write already is, here)."""

    def close(self) -> None:
        """Release what the sink holds (nothing here)."""

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc_info: object) -> None:
        self.close()


class DeadLetterFile(DeadLetterCounter):
    """Appends dead letters to a JSON Lines file, flushed after each one, and counts them."""

    def __init__(self, path: str | os.PathLike[str]) -> None:
        super().__init__()
        self.path = path
        self._lines = JsonLinesFile(path)

    def write(self, letter: DeadLetter) -> None:
        """Append ``letter`` as one JSON line, flush, and count it."""
        self._lines.write(_as_json(letter))
        super().write(letter)

    def flush(self) -> None:
        """Make what was written durable (fsync)."""
        self._lines.flush()

    def position(self) -> int | None:
        """The file's length in bytes."""
        return self._lines.position()

    def identity(self) -> str | None:
        """Which file this is (see :meth:`JsonLinesFile.identity`)."""
        return self._lines.identity()

    def truncate(self, position: int | None, identity: str | None = None) -> None:
        """Cut the file back to ``position`` bytes (see :meth:`JsonLinesFile.truncate`)."""
        self._lines.truncate(position, identity)

    def close(self) -> None:
        """Close the file."""
        self._lines.close()


def _as_json(letter: DeadLetter) -> dict[str, object]:
    """The JSON Lines record of one dead letter."""
    return {
        "key": letter.key,
        "reason": letter.reason,
        "detail": letter.detail,
        "source": letter.source,
        "partition": letter.partition,
        "offset": letter.offset,
        "raw_base64": base64.b64encode(letter.raw).decode("ascii"),
        "raw_text": letter.raw.decode("utf-8", errors="replace")[:RAW_TEXT_LIMIT],
    }
