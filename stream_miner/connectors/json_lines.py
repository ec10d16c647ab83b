"""An append-only JSON Lines file that knows its length and can be cut back (so a restart
can drop what was written after the checkpoint it resumes from)."""

from __future__ import annotations

import json
import os
import stat
import sys


class JsonLinesFile:
    """JSON-ready objects appended one per line, flushed after each."""

    def __init__(self, path: str | os.PathLike[str]) -> None:
        self.path = path
        self._file = open(path, "a", encoding="utf-8")  # noqa: SIM115 - closed by close()
        self._regular = stat.S_ISREG(os.fstat(self._file.fileno()).st_mode)  # not a pipe or /dev/null

    def write(self, record: dict) -> None:
        """Append ``record`` as one line and flush it."""
        self._file.write(json.dumps(record, ensure_ascii=False, allow_nan=False) + "\n")
        self._file.flush()

    def flush(self) -> None:
        """Make what was written durable (fsync; a pipe or device has nothing to sync)."""
        self._file.flush()
        if self._regular:
            os.fsync(self._file.fileno())

    def position(self) -> int | None:
        """The file's length in bytes (None for a pipe or device: nothing to cut back)."""
        self._file.flush()
        return os.fstat(self._file.fileno()).st_size if self._regular else None

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
