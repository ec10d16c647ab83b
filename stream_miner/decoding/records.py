"""The record model every source yields: a basket, or a dead letter saying why there is none.

:data:`REASONS` is the one table of dead-letter reasons: every reader, decoder and the run
loop use these labels and nothing else, and the README lists them from here.
"""

from __future__ import annotations

from dataclasses import dataclass, field

REASONS: dict[str, str] = {
    "empty message": "a Kafka message without a value",
    "message too large": "the message is longer than --max-message-bytes",
    "invalid UTF-8": "the bytes are not UTF-8 text",
    "invalid JSON": "a JSON Lines line or message that does not parse",
    "not a JSON object": "valid JSON, but not an object",
    "no items": "the items field is missing or null",
    "items not a list": "the items field is not an array",
    "bad item": "an item is neither a string nor an object with a string under --item-key",
    "empty basket": "a basket with no items",
    "basket too large": "more distinct items than --max-basket-items (with --oversize skip)",
    "bad id": "the id is neither a string nor an integer",
    "bad event time": "the time is not a number or an ISO-8601 string, or out of range",
    "bad segment": "the segment field is not a string",
    "wrong number of fields": "a CSV row with more or fewer fields than the header",
    "empty field": "a CSV row with an empty transaction id or item",
    "transaction not contiguous": "CSV rows of one transaction after rows of another",
    "no event time": "a basket without a time in an event-time window (--window-time)",
    "too late": "older than the watermark allows (--allowed-lateness)",
}

# Well-formed baskets that the window refuses: always set aside and counted, never a reason
# for `mine --bad-records stop` to stop.
REFUSED_BASKETS = frozenset({"empty basket", "basket too large", "no event time", "too late"})


@dataclass(frozen=True, slots=True)
class Basket:
    """A decoded basket: distinct item names in first-seen order, id, event time (epoch
    seconds), segment, and the raw bytes it was decoded from (for a dead letter later)."""

    items: list[str]
    id: str | None
    ts: float | None
    segment: str | None = None
    raw: bytes = field(default=b"", compare=False, repr=False)


@dataclass(frozen=True, slots=True)
class DeadLetter:
    """Input that is not a basket: the raw bytes, why (``reason`` is a key of
    :data:`REASONS`), a detail for a person, and where it came from."""

    raw: bytes
    reason: str
    detail: str
    source: str
    partition: int | None
    offset: int | None

    @property
    def key(self) -> str:
        """A deterministic id: where the record was read (``SOURCE/PARTITION/OFFSET``); the
        same bad record always gets the same key, so readers can tell repeats apart."""
        return f"{self.source}/{self.partition or 0}/{self.offset}"

    def message(self) -> str:
        """One line for a person: where, what, why."""
        if self.partition in (None, 0):
            where = f"line {self.offset}"
        else:
            where = f"partition {self.partition} offset {self.offset}"
        return f"{where}: {self.reason}: {self.detail}"


@dataclass(frozen=True, slots=True)
class SourceRecord:
    """A decoded record and its position: partition and offset (for files: 0 and the line).
    ``learn_only``: read again only to learn its basket id (a partition taken over from
    another member: see ``--dedup-lookback``), never counted."""

    payload: Basket | DeadLetter
    partition: int
    offset: int
    learn_only: bool = False
