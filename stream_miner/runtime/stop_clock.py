"""A stop request with a time bound: SIGTERM/SIGINT start the clock, and every wait for an
outside system after that gets only what is left of the bound, less a reserve for the local
work that follows (the last checkpoint is written before those waits; the process still has
to end)."""

from __future__ import annotations

import math
import threading
import time

DEFAULT_STOP_WITHIN = 10.0  # seconds from a stop signal to the end of `run` (--stop-within)
RESERVE = 1.0  # seconds of the bound (at most half of it) kept from the waits for the process's end


class StopClock(threading.Event):
    """An event that, once set, also tells how much of ``within`` seconds is left.

    >>> clock = StopClock(within=5.0)
    >>> clock.budget(30.0)
    30.0
    >>> clock.set()
    >>> 3.5 < clock.budget(30.0) <= 4.0
    True
    """

    def __init__(self, within: float = DEFAULT_STOP_WITHIN) -> None:
        super().__init__()
        if not within > 0:
            raise ValueError(f"--stop-within must be positive, got {within:g}")
        self.within = within
        self._deadline = math.inf

    def set(self) -> None:
        """Ask for a stop; the first call starts the clock (safe in a signal handler)."""
        if not self.is_set():
            self._deadline = time.monotonic() + self.within - min(RESERVE, self.within / 2)
        super().set()

    def budget(self, usual: float) -> float:
        """Seconds a wait may take: ``usual`` before a stop, then at most what is left of
        the bound less the reserve (0 once it is spent)."""
        return min(usual, max(0.0, self._deadline - time.monotonic()))

    def spent(self) -> bool:
        """True once a stop was asked for and its bound has passed."""
        return self.is_set() and self.budget(math.inf) == 0.0
