"""What a source yields: a raw basket, or a bad record with the reason it was refused."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class RawBasket:
    """One basket as read: item names, where it came from, and optional id and event time."""

    items: list[str]
    line: int
    id: str | None = None
    ts: float | None = None


@dataclass(frozen=True)
class BadRecord:
    """Input that could not be read as a basket. ``reason`` is a short stable label."""

    line: int
    reason: str
    detail: str
    raw: bytes = b""

    def message(self) -> str:
        """One line for a person: where, what, why."""
        return f"line {self.line}: {self.reason}: {self.detail}"
