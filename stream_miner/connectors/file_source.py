"""Baskets from a file or stdin, replayed as a stream (optionally following a growing file).

Records are read by :func:`stream_miner.decoding.files.read_records`, the same reader
``mine`` uses. A record's position is its line number on partition 0, so a checkpoint can
resume after the last line it covers.
"""

from __future__ import annotations

import os
import sys
from collections.abc import Callable, Iterator
from typing import IO

from stream_miner.decoding.files import FOLLOW_FORMATS, FileLayout, InputError, read_records
from stream_miner.decoding.records import SourceRecord
from stream_miner.runtime.ledger import CommitOutcome
from stream_miner.runtime.pace import Pace
from stream_miner.runtime.protocols import Handover


class FileSource:
    """Reads records from ``path`` (``-``: stdin) laid out as ``layout`` says."""

    def __init__(
        self, path: str, layout: FileLayout, *, follow: bool = False, pace: float | None = None
    ) -> None:
        if follow and layout.fmt not in FOLLOW_FORMATS:
            raise InputError(f"--follow works with {' and '.join(FOLLOW_FORMATS)} input, not {layout.fmt}")
        if pace is not None and not pace > 0:
            raise InputError(f"pace must be positive, got {pace}")
        self._pace = None if pace is None else Pace(pace)
        self.name = "stdin" if path == "-" else f"file:{path}"
        self.shares_partitions = False  # one reader: the checkpoint alone records progress
        self.handover: Handover | None = None  # files are never handed over
        self._follow = follow
        try:
            self._stream: IO[bytes] = sys.stdin.buffer if path == "-" else open(path, "rb")  # noqa: SIM115
        except OSError as error:
            raise InputError(f"cannot read {path!r}: {error.strerror}") from None
        self._records = self._read(layout, follow)
        self._held: SourceRecord | None = None  # read but not yet due (pace)
        self._resume_at = 0
        self._done = False

    def _read(self, layout: FileLayout, follow: bool) -> Iterator[SourceRecord | None]:
        yield from read_records(self._stream, layout, self.name, follow=follow)
        self._done = True

    def seek(self, positions: dict[int, int], identity: dict[str, str]) -> dict[int, int]:
        """Skip every record before the checkpointed next offset of partition 0."""
        self._resume_at = positions.get(0, 0)
        return positions

    def identity(self) -> dict[str, str]:
        """Nothing beyond the name: a file has no id."""
        return {}

    def poll(self, max_records: int = 500) -> list[SourceRecord]:
        """Up to ``max_records`` records; fewer (maybe none) when the input has no more now."""
        out: list[SourceRecord] = []
        while len(out) < max_records and not self._done:
            record = self._held or next(self._records, None)
            self._held = None
            if record is None:
                break  # nothing more for now
            if record.offset < self._resume_at:
                continue  # a checkpoint covers it: skipped, and not paced
            if self._pace is not None and not self._pace.due():
                self._held = record
                break
            out.append(record)
        return out

    def exhausted(self) -> bool:
        """True once a finite input has been read to its end."""
        return self._done

    def position(self) -> str | None:
        """The share of a regular file read so far; None for stdin and pipes."""
        try:
            size = os.fstat(self._stream.fileno()).st_size
            return f"{min(1.0, self._stream.tell() / size):.0%} of {self.name} read" if size else None
        except (OSError, ValueError):
            return None

    def lag(self) -> dict[int, int]:
        """A file has no partitions to lag on."""
        return {}

    def while_busy(self, busy: Callable[[], bool]) -> None:
        """Wait while ``busy()`` says so: a file needs no attention meanwhile."""
        while busy():
            pass

    def commit(self, positions: dict[int, int]) -> tuple[dict[int, int], CommitOutcome]:
        """Files keep no consumer positions: the checkpoint is the only record of progress."""
        return positions, CommitOutcome.ACKED

    def has_progress(self) -> bool:
        """A file keeps no record of who read it."""
        return False

    def close(self) -> None:
        if self._stream is not sys.stdin.buffer:
            self._stream.close()
