"""Replay at a steady rate: at most so many records a second, never a burst to catch up."""

from __future__ import annotations

import time

LONGEST_WAIT = 0.05  # seconds: a source waiting for its next record returns to the loop this often
CATCH_UP = 1.0  # seconds of missed slots a late reader may make up at once


class Pace:
    """Says when the next record is due at ``per_second`` records a second."""

    def __init__(self, per_second: float) -> None:
        if not per_second > 0:
            raise ValueError(f"pace must be positive, got {per_second}")
        self.per_second = per_second
        self._next_due = time.monotonic()

    def due(self) -> bool:
        """True when the next record may go now (its slot is then taken); else wait a little
        (at most ``LONGEST_WAIT``) and return False."""
        now = time.monotonic()
        if now < self._next_due:
            time.sleep(min(self._next_due - now, LONGEST_WAIT))
            return False
        self._next_due = max(self._next_due, now - CATCH_UP) + 1.0 / self.per_second
        return True
