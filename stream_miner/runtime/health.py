"""Telling the user when the input looks wrong, and the end-of-run summary line."""

from __future__ import annotations

from collections import Counter
from typing import TextIO

from stream_miner.engine.hygiene import Verdict

WATCH_AFTER = 100  # records seen before the share of dead letters is judged
MOSTLY = 0.5  # a reason holding more than this share of all records earns a warning
_HINTS = {
    "no event time": "the records carry no time in --time-field; use --window-size for a count window, "
    "or name the time field",
    "too late": "raise --allowed-lateness, or check the clocks of the producers",
    "invalid JSON": "is the input JSON Lines? give --format fimi or csv for other files",
    "not a JSON object": "each line or message must be a JSON object with the basket's fields",
    "no items": "name the field that holds the items with --items-field",
    "bad item": "items given as objects need their name under --item-key",
    "basket too large": "raise --max-basket-items, or --oversize truncate to keep the first items",
    "bad event time": "set --time-field and --time-unit to match the data",
}


class DeadLetterWatch:
    """Warns once when most records are set aside for one reason (with a hint); ``reasons``
    are the dead-letter sink's counts by reason."""

    def __init__(self, reasons: Counter[str], log: TextIO) -> None:
        self.reasons = reasons
        self.log = log
        self.records = 0
        self.warned = False

    def record(self) -> None:
        """Count one record read from the source."""
        self.records += 1

    def check(self, *, at_end: bool = False) -> None:
        """Warn (once) when one reason holds most records: after ``WATCH_AFTER`` records, or
        at the end of a shorter input."""
        if self.warned or not self.reasons or (self.records < WATCH_AFTER and not at_end):
            return
        reason, n = self.reasons.most_common(1)[0]
        if n <= MOSTLY * self.records:
            return
        self.warned = True
        hint = _HINTS.get(reason)
        print(
            f"stream-miner: warning: {n:,} of {self.records:,} records were set aside as {reason!r}"
            + (f"; {hint}" if hint else ""),
            file=self.log,
            flush=True,
        )


def summary(
    consumed: int, ticks: int, counts: Counter[str], dead_letters: Counter[str], verdicts: Counter[Verdict]
) -> str:
    """One line: baskets, ticks, what was skipped or cut, and dead letters by reason."""
    parts = [f"{plural(consumed, 'basket')} in the stream", plural(ticks, "tick")]
    parts += [f"{n} {what}" for what, n in sorted(counts.items()) if n]
    if verdicts[Verdict.TRUNCATED]:
        parts.append(f"{verdicts[Verdict.TRUNCATED]} oversized baskets truncated")
    if dead_letters:
        parts.append(
            "dead letters: " + ", ".join(f"{reason} {n}" for reason, n in sorted(dead_letters.items()))
        )
    return "; ".join(parts)


def plural(n: int, noun: str) -> str:
    """``1 tick``, ``2 ticks``."""
    return f"{n} {noun}" if n == 1 else f"{n} {noun}s"
