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
        found = os.fstat(self._file.fileno())
        self._regular = stat.S_ISREG(found.st_mode)  # not a pipe or /dev/null
        self._identity = f"{found.st_dev}:{found.st_ino}" if self._regular else None

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

    def identity(self) -> str | None:
        """Which file this is (device and inode; None for a pipe or device), so a restart
        cuts back only the file a checkpoint measured."""
        return self._identity

    def truncate(self, position: int | None, identity: str | None = None) -> None:
        """Cut the file back to ``position`` bytes, measured on the file ``identity`` (None:
        this one). Never another file (a run restarted with another path: a line says so) and
        never lengthened (a file shorter than a checkpoint says was cut outside stream-miner,
        and is left alone)."""
        if position is None:
            return
        if identity is not None and identity != self._identity:
            print(
                f"stream-miner: warning: {self.path} is not the file the checkpoint measured; "
                "appending to it without cutting anything back",
                file=sys.stderr,
            )
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
