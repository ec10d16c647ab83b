"""When to tick: after every N accepted baskets, or every S seconds, and once at the end.

The same rule serves ``mine`` and ``run``: with N, a tick is due as soon as the count of
accepted baskets since the stream began reaches the next multiple of N (so tick k follows
the (k + 1) x N-th basket of an uninterrupted stream, and an extra tick, at a stop or when a
time window lets several waiting baskets in at once, never shifts the later ones); a last
tick follows at the end of the input when baskets arrived after the previous tick (or there
was none).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field


@dataclass
class TickSchedule:
    """Watches the accepted-basket count and the wall clock for due ticks."""

    every: int | None = None
    interval: float | None = None
    ticks: int = 0
    _ticked_at_count: int = 0
    _ticked_at: float = field(default_factory=time.monotonic)

    def __post_init__(self) -> None:
        if self.every is not None and self.interval is not None:
            raise ValueError("give at most one of --tick-every and --tick-interval")
        if self.every is not None and self.every < 1:
            raise ValueError(f"--tick-every must be at least 1, got {self.every}")
        if self.interval is not None and not self.interval > 0:
            raise ValueError(f"--tick-interval must be positive, got {self.interval}")

    def count_due(self, consumed: int) -> bool:
        """True when ``consumed`` accepted baskets reach a multiple of N not ticked at yet."""
        return self.every is not None and consumed // self.every > self._ticked_at_count // self.every

    def interval_due(self) -> bool:
        """True when a wall-clock tick is due now."""
        return self.interval is not None and time.monotonic() - self._ticked_at >= self.interval

    def final_due(self, consumed: int) -> bool:
        """True when the end of the input owes a last tick."""
        return consumed > self._ticked_at_count or self.ticks == 0

    def ticked(self, consumed: int) -> None:
        """Note that a tick just happened, after ``consumed`` accepted baskets."""
        self.ticks += 1
        self._ticked_at_count = consumed
        self._ticked_at = time.monotonic()

    def restored(self, ticks: int, consumed: int) -> None:
        """Carry on after a restart: ``ticks`` done, the last after ``consumed`` baskets."""
        self.ticks = ticks
        self._ticked_at_count = consumed
