"""When to tick: after every N accepted baskets, or every S seconds, and once at the end.

The same rule serves ``mine`` and ``run``: tick k (0, 1, ...) comes after (k + 1) x N
accepted baskets, counted from the start of the stream, and a last tick follows at the end
of a finite input when baskets arrived after the previous tick (or there was none).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field


@dataclass
class TickSchedule:
    """Counts accepted baskets and wall-clock time since the last tick."""

    every: int | None = None
    interval: float | None = None
    since_tick: int = 0
    ticks: int = 0
    _last_at: float = field(default_factory=time.monotonic)

    def __post_init__(self) -> None:
        if self.every is not None and self.interval is not None:
            raise ValueError("give at most one of --tick-every and --tick-interval")
        if self.every is not None and self.every < 1:
            raise ValueError(f"--tick-every must be at least 1, got {self.every}")
        if self.interval is not None and not self.interval > 0:
            raise ValueError(f"--tick-interval must be positive, got {self.interval}")

    def accepted(self) -> bool:
        """Count one accepted basket; True when a tick is due now (count schedule)."""
        self.since_tick += 1
        return self.every is not None and self.since_tick >= self.every

    def interval_due(self) -> bool:
        """True when a wall-clock tick is due now."""
        return self.interval is not None and time.monotonic() - self._last_at >= self.interval

    def final_due(self) -> bool:
        """True when the end of the input owes a last tick."""
        return self.since_tick > 0 or self.ticks == 0

    def ticked(self) -> None:
        """Note that a tick just happened."""
        self.since_tick = 0
        self.ticks += 1
        self._last_at = time.monotonic()
