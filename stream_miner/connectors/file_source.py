"""Baskets from a file or stdin, replayed as a stream (optionally following a growing file).

The position of a record is its line number (for CSV: the line of the basket's first row), on
partition 0, so a checkpoint can resume after the last line it covers. ``jsonl`` lines are
decoded like Kafka messages (:func:`connectors.messages.decode_message`); ``fimi`` lines are
whitespace-separated items; ``csv`` uses the long-format reader of :mod:`stream_miner.decoding.files`.
"""

from __future__ import annotations

import sys
import time
from collections.abc import Iterator
from dataclasses import dataclass
from typing import BinaryIO

from stream_miner.decoding.files import InputError, read_csv
from stream_miner.decoding.messages import Basket, DeadLetter, MessageFormat, decode_message
from stream_miner.decoding.records import BadRecord, RawBasket

FOLLOW_FORMATS = ("jsonl", "fimi")


@dataclass(frozen=True)
class SourceRecord:
    """A decoded record and where it came from."""

    payload: Basket | DeadLetter
    partition: int
    offset: int


class FileSource:
    """Reads records from ``path`` (``-``: stdin) in format ``fmt``."""

    def __init__(
        self,
        path: str,
        fmt: str,
        message_format: MessageFormat,
        *,
        follow: bool = False,
        pace: float | None = None,
        csv_id_column: str = "transaction_id",
        csv_item_column: str = "item",
    ) -> None:
        if follow and fmt not in FOLLOW_FORMATS:
            raise InputError(f"--follow works with {' and '.join(FOLLOW_FORMATS)} input, not {fmt}")
        if pace is not None and not pace > 0:
            raise InputError(f"pace must be positive, got {pace}")
        self.name = "stdin" if path == "-" else f"file:{path}"
        self._format = message_format
        self._fmt = fmt
        self._follow = follow
        self._pace = pace
        try:
            self._stream: BinaryIO = sys.stdin.buffer if path == "-" else open(path, "rb")  # noqa: SIM115
        except OSError as error:
            raise InputError(f"cannot read {path!r}: {error.strerror}") from None
        self._records = self._read(csv_id_column, csv_item_column)
        self._resume_at = 0
        self._done = False
        self._next_due = time.monotonic()

    def seek(self, positions: dict[int, int]) -> None:
        """Skip every record before the checkpointed next offset of partition 0."""
        self._resume_at = positions.get(0, 0)

    def poll(self, max_records: int = 500) -> list[SourceRecord]:
        """Up to ``max_records`` records; fewer (maybe none) when the input has no more now."""
        out: list[SourceRecord] = []
        while len(out) < max_records and not self._done:
            if self._pace is not None and not self._wait_for_pace():
                break
            record = next(self._records, None)
            if record is None:
                if not self._follow:
                    self._done = True
                break
            if record.offset >= self._resume_at:
                out.append(record)
        return out

    def exhausted(self) -> bool:
        """True once a finite input has been read to its end."""
        return self._done

    def commit(self, positions: dict[int, int]) -> None:
        """Files keep no consumer positions: the checkpoint is the only record of progress."""

    def close(self) -> None:
        if self._stream is not sys.stdin.buffer:
            self._stream.close()

    def _wait_for_pace(self) -> bool:
        now = time.monotonic()
        if now < self._next_due:
            time.sleep(min(self._next_due - now, 0.05))
            return False
        assert self._pace is not None
        self._next_due = max(self._next_due, now - 1.0) + 1.0 / self._pace
        return True

    def _read(self, csv_id_column: str, csv_item_column: str) -> Iterator[SourceRecord | None]:
        if self._fmt == "csv":
            for found in read_csv(self._stream, id_column=csv_id_column, item_column=csv_item_column):
                yield self._from_file_record(found)
            return
        line_number = 0
        partial = b""
        while True:
            chunk = self._stream.readline()
            if not chunk:
                if not self._follow:
                    if partial:
                        line_number += 1
                        yield self._decode(partial, line_number)
                    return
                yield None  # nothing more for now; the caller polls again later
                time.sleep(0.05)
                continue
            partial += chunk
            if not partial.endswith(b"\n"):
                continue  # a line still being written
            line, partial = partial, b""
            line_number += 1
            if line.strip() or self._fmt == "fimi":
                yield self._decode(line.rstrip(b"\r\n"), line_number)

    def _decode(self, line: bytes, line_number: int) -> SourceRecord:
        if self._fmt == "jsonl":
            payload = decode_message(line, self._format, source=self.name, partition=0, offset=line_number)
        else:
            payload = self._fimi(line, line_number)
        return SourceRecord(payload, 0, line_number)

    def _fimi(self, line: bytes, line_number: int) -> Basket | DeadLetter:
        try:
            text = line.decode("utf-8").removeprefix("\ufeff")
        except UnicodeDecodeError as error:
            return DeadLetter(line, "invalid UTF-8", str(error), self.name, 0, line_number)
        items = list(dict.fromkeys(text.split()))
        if not items:
            return DeadLetter(line, "empty basket", "the line holds no items", self.name, 0, line_number)
        return Basket(items=items, id=None, ts=None, segment=None)

    def _from_file_record(self, found: RawBasket | BadRecord) -> SourceRecord:
        if isinstance(found, BadRecord):
            letter = DeadLetter(found.raw, found.reason, found.detail, self.name, 0, found.line)
            return SourceRecord(letter, 0, found.line)
        basket = Basket(items=list(dict.fromkeys(found.items)), id=found.id, ts=found.ts, segment=None)
        return SourceRecord(basket, 0, found.line)
