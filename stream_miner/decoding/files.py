"""File readers for baskets: FIMI, JSON Lines and long-format CSV.

Every reader takes a binary stream and yields :class:`RawBasket` or :class:`BadRecord`
values in input order, never raising on bad content, so the caller decides whether a bad
line stops the run or is skipped and counted.

- ``fimi``: one basket per line, items separated by whitespace; an empty line is an empty
  basket.
- ``jsonl``: one JSON object per line with ``items`` (list of strings) and optional ``id``
  (string or integer) and ``ts`` (epoch seconds, or an ISO-8601 string); blank lines are
  ignored.
- ``csv``: long format with a header row, one line item per row; the transaction-id and item
  columns are chosen by name. Rows of one transaction must be contiguous; blank lines are
  ignored.
A UTF-8 byte-order mark at the start of a file is ignored.
"""

from __future__ import annotations

import csv
import io
import json
import math
from collections.abc import Iterator
from datetime import UTC, datetime
from typing import IO

from stream_miner.decoding.records import BadRecord, RawBasket

FORMATS = ("fimi", "jsonl", "csv")
_EXTENSIONS = {
    ".fimi": "fimi",
    ".dat": "fimi",
    ".txt": "fimi",
    ".basket": "fimi",
    ".jsonl": "jsonl",
    ".ndjson": "jsonl",
    ".csv": "csv",
}

Record = RawBasket | BadRecord


class InputError(ValueError):
    """Input that cannot be read at all (unknown format, missing CSV columns)."""


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
    stream: IO[bytes], fmt: str, *, csv_id_column: str = "transaction_id", csv_item_column: str = "item"
) -> Iterator[Record]:
    """Records of ``stream`` in format ``fmt`` (see the module docstring)."""
    if fmt == "fimi":
        return read_fimi(stream)
    if fmt == "jsonl":
        return read_jsonl(stream)
    if fmt == "csv":
        return read_csv(stream, id_column=csv_id_column, item_column=csv_item_column)
    raise InputError(f"unknown format {fmt!r}; choose from {', '.join(FORMATS)}")


def _decoded_lines(stream: IO[bytes]) -> Iterator[tuple[int, bytes, str | BadRecord]]:
    for number, raw in enumerate(stream, start=1):
        try:
            text = raw.decode("utf-8")
        except UnicodeDecodeError as error:
            yield number, raw, BadRecord(number, "invalid UTF-8", str(error), raw)
            continue
        if number == 1:
            text = text.removeprefix("\ufeff")  # a byte-order mark is not part of the data
        yield number, raw, text.rstrip("\r\n")


def read_fimi(stream: IO[bytes]) -> Iterator[Record]:
    """One basket per line, items separated by whitespace."""
    for number, _, text in _decoded_lines(stream):
        if isinstance(text, BadRecord):
            yield text
        else:
            yield RawBasket(items=text.split(), line=number)


def read_jsonl(stream: IO[bytes]) -> Iterator[Record]:
    """One JSON object per line: ``{"items": [...], "id": ..., "ts": ...}``."""
    for number, raw, text in _decoded_lines(stream):
        if isinstance(text, BadRecord):
            yield text
        elif text.strip():
            yield parse_json_basket(text, number, raw)


def parse_json_basket(text: str, line: int, raw: bytes) -> Record:
    """One JSON Lines record as a basket, or the reason it is not one."""
    try:
        value = json.loads(text)
    except (ValueError, RecursionError) as error:  # also too-long integers, too-deep nesting
        return BadRecord(line, "invalid JSON", str(error) or type(error).__name__, raw)
    if not isinstance(value, dict):
        return BadRecord(line, "not a JSON object", f"got {type(value).__name__}", raw)
    items = value.get("items")
    if items is None:
        return BadRecord(line, "no items", 'the object has no "items" field', raw)
    if not isinstance(items, list):
        return BadRecord(line, "items not a list", f'"items" is {type(items).__name__}', raw)
    for item in items:
        if not isinstance(item, str):
            return BadRecord(line, "item not a string", f"item {item!r} is {type(item).__name__}", raw)
    basket_id = value.get("id")
    if (basket_id is not None and not isinstance(basket_id, (str, int))) or isinstance(basket_id, bool):
        return BadRecord(line, "bad id", f'"id" must be a string or an integer, got {basket_id!r}', raw)
    ts = value.get("ts")
    if ts is not None:
        try:
            ts = parse_event_time(ts)
        except ValueError as error:
            return BadRecord(line, "bad event time", str(error), raw)
    return RawBasket(items=items, line=line, id=None if basket_id is None else str(basket_id), ts=ts)


def parse_event_time(value: object) -> float:
    """Epoch seconds from a number (seconds) or an ISO-8601 string (naive means UTC)."""
    if isinstance(value, bool):
        raise ValueError(f"event time must be a number or an ISO-8601 string, got {value!r}")
    if isinstance(value, (int, float)):
        try:
            seconds = float(value)
        except OverflowError:
            raise ValueError("event time is out of range") from None
        if not math.isfinite(seconds):
            raise ValueError(f"event time must be finite, got {value!r}")
        return seconds
    if isinstance(value, str):
        try:
            moment = datetime.fromisoformat(value.replace("Z", "+00:00"))
        except ValueError:
            raise ValueError(f"event time {value!r} is not ISO-8601") from None
        if moment.tzinfo is None:
            moment = moment.replace(tzinfo=UTC)
        return moment.timestamp()
    raise ValueError(f"event time must be a number or an ISO-8601 string, got {value!r}")


def read_csv(stream: IO[bytes], *, id_column: str, item_column: str) -> Iterator[Record]:
    """Long-format CSV: one row per line item, grouped into baskets by transaction id."""
    text = io.TextIOWrapper(stream, encoding="utf-8-sig", errors="surrogateescape", newline="")
    reader = csv.reader(text)
    header = _next_row(reader)
    if header is None:
        return
    if _has_undecodable(header):
        raise InputError("line 1: invalid UTF-8 in the CSV header")
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
    while (row := _next_row(reader)) is not None:
        line = reader.line_num
        if not row:
            continue  # a blank line holds no line item
        if _has_undecodable(row):
            yield BadRecord(line, "invalid UTF-8", "a field is not valid UTF-8")
            continue
        if len(row) != len(header):
            yield BadRecord(line, "wrong number of fields", f"expected {len(header)}, got {len(row)}")
            continue
        transaction, item = row[id_at], row[item_at]
        if not transaction or not item:
            yield BadRecord(line, "empty field", f"transaction id {transaction!r}, item {item!r}")
            continue
        if transaction != current_id:
            if current_id is not None:
                finished.add(current_id)
                yield RawBasket(items=items, line=first_line, id=current_id)
            if transaction in finished:
                yield BadRecord(
                    line,
                    "transaction not contiguous",
                    f"rows of transaction {transaction!r} appear after other transactions",
                )
                current_id, items = None, []
                continue
            current_id, items, first_line = transaction, [], line
        items.append(item)
    if current_id is not None:
        yield RawBasket(items=items, line=first_line, id=current_id)


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
