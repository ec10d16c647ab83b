"""Decoding one message (a Kafka value, or one line of a file or stdin) into a basket.

A message is a JSON object such as
``{"id": "t1", "ts": "2024-03-01T12:00:00Z", "items": ["A1", {"sku": "B2", "qty": 2}]}``.
Field names, the key that names an item object and the unit of numeric event times are set
by :class:`MessageFormat`. Items are kept by membership only: quantities are ignored and a
repeated item counts once. :func:`decode_message` never raises on any input bytes: a message
that is not a basket comes back as a :class:`DeadLetter` whose ``reason`` is a key of
:data:`~stream_miner.decoding.records.REASONS`, so the caller can set it aside and move on.
The basket size cap is not checked here: it belongs to the window's basket policy.

Speed: the common message (at most ``FAST_BYTES`` long, string items, a string or integer
id) is read by orjson in one pass; anything else, including every message that is not a
basket, takes the full path with the standard json module, which alone decides refusals and
their details. Both paths give the same basket for every message the fast one accepts.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from datetime import UTC, datetime

import orjson

from stream_miner.decoding.records import Basket, DeadLetter

TIME_UNITS = ("s", "ms", "auto")
AUTO_MILLISECONDS_ABOVE = 1e11  # with time_unit "auto", larger numbers are milliseconds
# Numeric event times must fall in years 1 to 9999 (UTC), the range of ISO-8601 dates.
_MIN_SECONDS = datetime.min.replace(tzinfo=UTC).timestamp()
_MAX_SECONDS = datetime.max.replace(tzinfo=UTC).timestamp()
_DETAIL_LIMIT = 200
# The fast path reads messages up to this long. The standard json module refuses integers
# over 4,300 digits and nesting near the recursion limit; orjson reads both, so a message
# short enough that neither can occur decodes alike with both.
FAST_BYTES = 1024
_JSON_TYPES = {
    dict: "an object",
    list: "an array",
    str: "a string",
    bool: "a boolean",
    int: "an integer",
    float: "a decimal number",
    type(None): "null",
}


@dataclass(frozen=True)
class MessageFormat:
    """Where a message keeps its fields, the unit of numeric times, and size limits.

    ``item_key`` names an item given as an object (``{"sku": "A1", "qty": 2}``).
    ``time_unit`` is ``"s"``, ``"ms"`` or ``"auto"`` (numbers above 1e11 are milliseconds).
    """

    id_field: str = "id"
    time_field: str = "ts"
    items_field: str = "items"
    segment_field: str | None = None
    item_key: str = "sku"
    time_unit: str = "auto"
    max_message_bytes: int = 1_000_000

    def __post_init__(self) -> None:
        if self.time_unit not in TIME_UNITS:
            raise ValueError(f"time_unit must be one of {', '.join(TIME_UNITS)}, got {self.time_unit!r}")
        if self.max_message_bytes < 1:
            raise ValueError("max_message_bytes must be at least 1")


class _Refused(Exception):
    """Internal: a message is not a basket, for ``reason``."""

    def __init__(self, reason: str, detail: str) -> None:
        super().__init__(reason, detail)
        self.reason = reason
        self.detail = detail[:_DETAIL_LIMIT]


def decode_message(
    raw: bytes, fmt: MessageFormat, *, source: str, partition: int | None = None, offset: int | None = None
) -> Basket | DeadLetter:
    """The basket in ``raw``, or a dead letter saying why there is none. Never raises."""
    if len(raw) <= FAST_BYTES and len(raw) <= fmt.max_message_bytes:
        basket = _fast_basket(raw, fmt)
        if basket is not None:
            return basket
    try:
        return _basket(_json_object(raw, fmt), fmt, raw)
    except _Refused as refusal:
        return DeadLetter(raw, refusal.reason, refusal.detail, source, partition, offset)


def _fast_basket(raw: bytes, fmt: MessageFormat) -> Basket | None:
    """The basket in a well-formed message of string items, or None: then the full path
    decides. orjson refuses lone surrogates, byte-order marks and non-finite numbers, which
    the full path handles; it reads integers beyond 64 bits as floats, which are refused
    here as ids and out of range as event times."""
    try:
        message = orjson.loads(raw)
    except orjson.JSONDecodeError:
        return None
    if type(message) is not dict:
        return None
    items = message.get(fmt.items_field)
    if type(items) is not list or not items:
        return None
    try:
        names = list(dict.fromkeys(items))
    except TypeError:
        return None
    for name in names:
        if type(name) is not str:
            return None
    basket_id = message.get(fmt.id_field)
    if basket_id is not None and type(basket_id) is not str:
        if type(basket_id) is not int:
            return None
        basket_id = str(basket_id)
    ts = message.get(fmt.time_field)
    segment = None if fmt.segment_field is None else message.get(fmt.segment_field)
    if segment is not None and type(segment) is not str:
        return None
    if ts is not None:
        try:
            ts = _event_time(ts, fmt)
        except _Refused:
            return None
    return Basket(names, basket_id, ts, segment, raw)


def _json_object(raw: bytes, fmt: MessageFormat) -> dict[str, object]:
    """The JSON object in ``raw``; the size is checked before any decoding."""
    if len(raw) > fmt.max_message_bytes:
        raise _Refused("message too large", f"{len(raw)} bytes, limit {fmt.max_message_bytes}")
    try:
        text = raw.decode("utf-8-sig")  # a leading byte-order mark is not part of the data
    except UnicodeDecodeError as error:
        raise _Refused("invalid UTF-8", str(error)) from None
    try:
        value = json.loads(text)
    except (ValueError, RecursionError) as error:  # also too-long integers, too-deep nesting
        raise _Refused("invalid JSON", str(error) or type(error).__name__) from None
    if not isinstance(value, dict):
        raise _Refused("not a JSON object", f"the message is {_json_type(value)}")
    return value


def _basket(message: dict[str, object], fmt: MessageFormat, raw: bytes) -> Basket:
    """The basket held by a message object; JSON null counts as a missing field."""
    items = _items(message.get(fmt.items_field), fmt)
    if b"\\ud" in raw or b"\\uD" in raw:  # JSON escapes can spell lone surrogates: not text
        _check_text(items)
    return Basket(
        items=items,
        id=_basket_id(message.get(fmt.id_field), fmt.id_field),
        ts=_event_time(message.get(fmt.time_field), fmt),
        segment=_segment(message, fmt),
        raw=raw,
    )


def _items(value: object, fmt: MessageFormat) -> list[str]:
    """Distinct item names in first-seen order."""
    field = fmt.items_field
    if value is None:
        raise _Refused("no items", f'"{field}" is missing or null')
    if not isinstance(value, list):
        raise _Refused("items not a list", f'"{field}" is {_json_type(value)}')
    if not value:
        raise _Refused("empty basket", f'"{field}" is an empty array')
    try:
        names = list(dict.fromkeys(value))  # the common case: every item a string
    except TypeError:  # an unhashable item, e.g. an object
        names = []
    if not names or not all(type(name) is str for name in names):
        names = list(dict.fromkeys(_item_name(item, index, fmt.item_key) for index, item in enumerate(value)))
    return names


def _check_text(names: list[str]) -> None:
    """Every name can be written out as UTF-8 (no lone surrogates)."""
    for index, name in enumerate(names):
        try:
            name.encode("utf-8")
        except UnicodeEncodeError:
            raise _Refused("bad item", f"item {index} is not valid Unicode text (a lone surrogate)") from None


def _item_name(item: object, index: int, item_key: str) -> str:
    """The name of one item: a string, or the string under ``item_key`` of an object."""
    if isinstance(item, str):
        return item
    if isinstance(item, dict) and isinstance(name := item.get(item_key), str):
        return name
    raise _Refused(
        "bad item",
        f'item {index} is {_json_type(item)}, not a string nor an object with a string "{item_key}"',
    )


def _basket_id(value: object, field: str) -> str | None:
    """A string or integer id, as a string."""
    if value is None or isinstance(value, str):
        return value
    if isinstance(value, int) and not isinstance(value, bool):
        return str(value)
    raise _Refused("bad id", f'"{field}" is {_json_type(value)}, not a string or an integer')


def _event_time(value: object, fmt: MessageFormat) -> float | None:
    """Epoch seconds from a number in ``fmt.time_unit`` or an ISO-8601 string."""
    field = fmt.time_field
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float, str)):
        raise _Refused(
            "bad event time", f'"{field}" is {_json_type(value)}, not a number or an ISO-8601 string'
        )
    try:
        seconds = parse_event_time(value)
    except ValueError as error:
        raise _Refused("bad event time", f'"{field}": {error}') from None
    if isinstance(value, str):
        return seconds
    if fmt.time_unit == "ms" or (fmt.time_unit == "auto" and seconds > AUTO_MILLISECONDS_ABOVE):
        seconds /= 1000
    if not _MIN_SECONDS <= seconds <= _MAX_SECONDS:
        raise _Refused("bad event time", f'"{field}" is out of range (years 1 to 9999)')
    return seconds


def _segment(message: dict[str, object], fmt: MessageFormat) -> str | None:
    """The segment, when the format names a segment field."""
    if fmt.segment_field is None:
        return None
    value = message.get(fmt.segment_field)
    if value is None or isinstance(value, str):
        return value
    raise _Refused("bad segment", f'"{fmt.segment_field}" is {_json_type(value)}, not a string')


def _json_type(value: object) -> str:
    """What kind of JSON value ``value`` is, for a detail message."""
    return _JSON_TYPES[type(value)]


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
