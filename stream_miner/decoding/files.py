"""Baskets from files: FIMI, JSON Lines and long-format CSV, as :class:`SourceRecord` values.

Every format decodes into the same record model as a Kafka message, with the same reasons
(:data:`~stream_miner.decoding.records.REASONS`), and never raises on bad content; the
position of a record is its line number (for CSV: the line of the basket's first row).

- ``jsonl``: one message per line, decoded by :func:`~stream_miner.decoding.messages.decode_message`
  (field names, item objects and time units as the :class:`MessageFormat` says).
- ``fimi``: one basket per line, items separated by whitespace; an empty line is an empty
  basket (a dead letter, like ``{"items": []}``).
- ``csv``: long format with a header row, one line item per row; the transaction-id and item
  columns are chosen by name. Rows of one transaction must be contiguous.
Blank lines of JSON Lines and CSV hold no record. A UTF-8 byte-order mark is ignored.
"""

from __future__ import annotations

import csv
import io
import os
import select
import stat
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from typing import IO

from stream_miner.decoding.messages import MessageFormat, decode_message
from stream_miner.decoding.records import Basket, DeadLetter, SourceRecord

FORMATS = ("jsonl", "fimi", "csv")
FOLLOW_FORMATS = ("jsonl", "fimi")
FOLLOW_WAIT = 0.05  # seconds between looks at a followed file or a pipe that has nothing new
READ_CHUNK = 1 << 16  # bytes read at a time
_EXTENSIONS = {
    ".fimi": "fimi",
    ".dat": "fimi",
    ".txt": "fimi",
    ".basket": "fimi",
    ".jsonl": "jsonl",
    ".ndjson": "jsonl",
    ".csv": "csv",
}


class InputError(ValueError):
    """Input that cannot be read at all (unknown format, missing CSV columns, no such file)."""


@dataclass(frozen=True)
class FileLayout:
    """How a file holds baskets: its format, the message fields (JSON Lines) and the CSV
    columns."""

    fmt: str = "jsonl"
    message: MessageFormat = MessageFormat()
    csv_id_column: str = "transaction_id"
    csv_item_column: str = "item"

    def __post_init__(self) -> None:
        if self.fmt not in FORMATS:
            raise InputError(f"unknown format {self.fmt!r}; choose from {', '.join(FORMATS)}")


def detect_format(path: str) -> str:
    """The format implied by a file name's extension."""
    lowered = path.lower()
    for extension, fmt in _EXTENSIONS.items():
        if lowered.endswith(extension):
            return fmt
    raise InputError(
        f"cannot tell the format of {path!r} from its extension; give --format ({', '.join(FORMATS)})"
    )


def read_records(
    stream: IO[bytes], layout: FileLayout, source: str, *, follow: bool = False
) -> Iterator[SourceRecord | None]:
    """The records of ``stream`` in input order. ``None`` means nothing more for now (ask
    again later): a followed file has no complete new line, or a pipe has no data yet. With
    ``follow`` the file is read as it grows, and a line still being written is held back until
    its newline arrives. A line longer than the message size limit is set aside as ``message
    too large`` after reading at most that much of it."""
    if layout.fmt == "csv":
        if follow:
            raise InputError(f"following a file works with {' and '.join(FOLLOW_FORMATS)} input, not csv")
        yield from read_csv(stream, layout, source)
        return
    decode = _jsonl_decoder(layout.message, source) if layout.fmt == "jsonl" else _fimi_decoder(source)
    limit = layout.message.max_message_bytes
    for number, line, length in _lines(stream, follow, limit):
        if line is None:
            yield None
        elif length > limit:
            letter = DeadLetter(
                line[:limit], "message too large", f"{length} bytes, limit {limit}", source, 0, number
            )
            yield SourceRecord(letter, 0, number)
        elif layout.fmt == "fimi" or line.strip():
            yield SourceRecord(decode(line, number), 0, number)


def _lines(stream: IO[bytes], follow: bool, limit: int) -> Iterator[tuple[int, bytes | None, int]]:
    """(number, line without its ending, its full length); (number, None, 0) when nothing
    more is there now. Of a line longer than ``limit`` only the first ``limit + 1`` bytes are
    kept, so a huge line never fills the memory."""
    number, kept, length = 0, b"", 0
    for piece in _pieces(stream, follow):
        if piece is None:
            yield number, None, 0
            continue
        while piece:
            cut = piece.find(b"\n") + 1
            head, piece = (piece[:cut], piece[cut:]) if cut else (piece, b"")
            if len(kept) <= limit:
                kept += head[: limit + 1 - len(kept)]
            length += len(head)
            if cut:
                number += 1
                ending = len(head) - len(head.rstrip(b"\r\n"))
                yield number, kept.rstrip(b"\r\n"), length - ending
                kept, length = b"", 0
    if length and not follow:
        yield number + 1, kept, length


def _pieces(stream: IO[bytes], follow: bool) -> Iterator[bytes | None]:
    """The bytes of ``stream`` as they come (lines or parts of lines from a regular file,
    chunks from a pipe or terminal), None when there is nothing now; ends at the end of the
    input. A pipe is read only once it has data, so a reader is never stuck in a read and can
    be stopped."""
    descriptor = _waitable(stream)
    while True:
        if descriptor is not None:
            if not select.select([descriptor], [], [], FOLLOW_WAIT)[0]:
                yield None
                continue
            piece = os.read(descriptor, READ_CHUNK)
            if not piece:
                return
        else:
            piece = stream.readline(READ_CHUNK)
            if not piece:
                if not follow:
                    return
                yield None
                time.sleep(FOLLOW_WAIT)
                continue
        yield piece


def _waitable(stream: IO[bytes]) -> int | None:
    """The descriptor of a pipe, socket or terminal (reading it may wait); None for a regular
    file or a stream without one."""
    try:
        descriptor = stream.fileno()
        mode = os.fstat(descriptor).st_mode
    except (OSError, ValueError, AttributeError):
        return None
    return None if stat.S_ISREG(mode) else descriptor


def _jsonl_decoder(message: MessageFormat, source: str) -> Callable[[bytes, int], Basket | DeadLetter]:
    def decode(line: bytes, number: int) -> Basket | DeadLetter:
        return decode_message(line, message, source=source, partition=0, offset=number)

    return decode


def _fimi_decoder(source: str) -> Callable[[bytes, int], Basket | DeadLetter]:
    def decode(line: bytes, number: int) -> Basket | DeadLetter:
        try:
            text = line.decode("utf-8").removeprefix("\ufeff")
        except UnicodeDecodeError as error:
            return DeadLetter(line, "invalid UTF-8", str(error), source, 0, number)
        items = list(dict.fromkeys(text.split()))
        if not items:
            return DeadLetter(line, "empty basket", "the line holds no items", source, 0, number)
        return Basket(items, None, None, raw=line)

    return decode


def read_csv(stream: IO[bytes], layout: FileLayout, source: str) -> Iterator[SourceRecord]:
    """Long-format CSV: one row per line item, grouped into baskets by transaction id."""
    text = io.TextIOWrapper(stream, encoding="utf-8-sig", errors="surrogateescape", newline="")
    reader = csv.reader(text)
    header = _next_row(reader)
    if header is None:
        return
    if _has_undecodable(header):
        raise InputError("line 1: invalid UTF-8 in the CSV header")
    id_column, item_column = layout.csv_id_column, layout.csv_item_column
    missing = [c for c in (id_column, item_column) if c not in header]
    if missing:
        raise InputError(
            f"CSV header has no column {', '.join(map(repr, missing))} (columns: "
            f"{', '.join(header)}); choose them with --csv-id-column / --csv-item-column"
        )
    id_at, item_at = header.index(id_column), header.index(item_column)
    current_id: str | None = None
    items: list[str] = []
    first_line = 0
    finished: set[str] = set()

    def refused(line: int, reason: str, detail: str, row: list[str]) -> SourceRecord:
        raw = ",".join(row).encode("utf-8", errors="surrogateescape")
        return SourceRecord(DeadLetter(raw, reason, detail, source, 0, line), 0, line)

    def basket() -> SourceRecord:
        assert current_id is not None
        return SourceRecord(Basket(list(dict.fromkeys(items)), current_id, None), 0, first_line)

    while (row := _next_row(reader)) is not None:
        line = reader.line_num
        if not row:
            continue  # a blank line holds no line item
        if _has_undecodable(row):
            yield refused(line, "invalid UTF-8", "a field is not valid UTF-8", row)
            continue
        if len(row) != len(header):
            yield refused(line, "wrong number of fields", f"expected {len(header)}, got {len(row)}", row)
            continue
        transaction, item = row[id_at], row[item_at]
        if not transaction or not item:
            yield refused(line, "empty field", f"transaction id {transaction!r}, item {item!r}", row)
            continue
        if transaction != current_id:
            if current_id is not None:
                finished.add(current_id)
                yield basket()
            if transaction in finished:
                detail = f"rows of transaction {transaction!r} appear after other transactions"
                yield refused(line, "transaction not contiguous", detail, row)
                current_id, items = None, []
                continue
            current_id, items, first_line = transaction, [], line
        items.append(item)
    if current_id is not None:
        yield basket()


def _next_row(reader: Iterator[list[str]]) -> list[str] | None:
    """The next CSV row, or None at the end; malformed CSV is an InputError."""
    try:
        return next(reader)
    except StopIteration:
        return None
    except csv.Error as error:
        raise InputError(f"line {reader.line_num}: unreadable CSV: {error}") from None  # type: ignore[attr-defined]


def _has_undecodable(fields: list[str]) -> bool:
    """True when a field holds bytes that were not valid UTF-8 (kept as surrogates)."""
    try:
        for field in fields:
            field.encode("utf-8")
    except UnicodeEncodeError:
        return True
    return False
