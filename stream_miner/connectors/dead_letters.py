"""Dead-letter sinks: where messages that are not baskets go, counted by reason.

:class:`DeadLetterFile` appends one JSON object per dead letter to a JSON Lines file::

    {"key", "reason", "detail", "source", "partition", "offset", "raw_base64", "raw_text"}

``key`` is the record's deterministic id (``SOURCE/PARTITION/OFFSET``); ``raw_base64`` holds
the full raw bytes; ``raw_text`` is a readable preview (UTF-8 with
replacement characters, at most 1000 characters). :class:`DeadLetterCounter` only counts.
"""

from __future__ import annotations

import base64
import json
import os
import sys
from collections import Counter
from typing import Self

from stream_miner.decoding.records import DeadLetter

RAW_TEXT_LIMIT = 1000


class DeadLetterCounter:
    """Counts dead letters by reason and keeps nothing else (for bad input the user drops)."""

    def __init__(self) -> None:
        self.counts: Counter[str] = Counter()

    def write(self, letter: DeadLetter) -> None:
        """Count ``letter`` under its reason."""
        self.counts[letter.reason] += 1

    def flush(self) -> None:
        """Make what was written durable (each write already is, here)."""

    def position(self) -> int | None:
        """Nothing is written, so there is nothing to cut back."""
        return None

    def truncate(self, position: int | None) -> None:
        """Nothing is written, so there is nothing to cut back."""

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
        self._file = open(path, "a", encoding="utf-8")  # noqa: SIM115 - closed by close()

    def write(self, letter: DeadLetter) -> None:
        """Append ``letter`` as one JSON line, flush, and count it."""
        self._file.write(json.dumps(_as_json(letter)) + "\n")
        self._file.flush()
        super().write(letter)

    def flush(self) -> None:
        """Make what was written durable (fsync)."""
        self._file.flush()
        os.fsync(self._file.fileno())

    def position(self) -> int | None:
        """The file's length in bytes."""
        self._file.flush()
        return os.fstat(self._file.fileno()).st_size

    def truncate(self, position: int | None) -> None:
        """Cut the file back to ``position`` bytes (never lengthen it: a file shorter than a
        checkpoint says was replaced or cut outside stream-miner, and is left alone)."""
        if position is None:
            return
        size = self.position() or 0
        if size > position:
            self._file.truncate(position)
            self.flush()
        elif size < position:
            print(
                f"stream-miner: warning: {self.path} is shorter than the checkpoint says "
                f"({size:,} < {position:,} bytes); left as it is",
                file=sys.stderr,
            )

    def close(self) -> None:
        """Close the file."""
        self._file.close()


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
