"""How a tick refreshes its result: by the tracked border, by a full mine, or by whichever
measured costs say is cheaper (the default).

The adaptive choice keeps moving averages of a full mine's time per basket in the window,
of a tracked tick's time and of what starting the tracking cost. Without a tracker, ticks
mine in full and bank, at each, the time a tracker would have saved; the tracking starts once
that credit covers its expected start (the ski-rental rule: what is spent waiting is at most
about what the start costs). A tracker whose ticks cost more than a full mine is dropped,
and the credit needed for the next start doubles, so data on which tracking never pays
costs a few starts at most.
"""

from __future__ import annotations

from enum import StrEnum

SMOOTHING = 0.3  # weight of the newest measurement in the moving averages
FIRST_START_IN_FULL_MINES = 1.0  # expected start before one was measured, in full mines


class Refresh(StrEnum):
    """How ticks refresh their result (the same result in every mode)."""

    ADAPTIVE = "adaptive"  # whichever measured costs say is cheaper
    FULL = "full"  # mine the whole window at every tick
    TRACKED = "tracked"  # always update the tracked border


class RefreshChooser:
    """Picks, tick by tick, between the tracked border and a full mine from measured costs."""

    def __init__(self) -> None:
        self.full_per_basket: float | None = None  # seconds of a full mine per window basket
        self.tracked: float | None = None  # seconds of a tracked tick
        self.start: float | None = None  # seconds the last start of the tracking took
        self.credit = 0.0  # seconds a tracker would have saved since the last decision
        self.patience = 1.0  # the credit a start needs, in expected starts

    def track(self, tracking: bool, n_baskets: int) -> bool:
        """Whether the next tick (of a window of ``n_baskets``) should use the tracker
        (``tracking``: one runs), starting it if none runs."""
        if tracking:
            return True
        if self.full_per_basket is None:
            return False  # measure a full mine first
        full = self.full_per_basket * max(n_baskets, 1)
        start = FIRST_START_IN_FULL_MINES * full if self.start is None else self.start
        return self.credit >= self.patience * start

    def full_mined(self, seconds: float, n_baskets: int) -> None:
        """A tick mined the window (of ``n_baskets``) in full in ``seconds``."""
        self.full_per_basket = _average(self.full_per_basket, seconds / max(n_baskets, 1))
        self.credit += max(0.0, seconds - (self.tracked or 0.0))

    def tracked_tick(self, seconds: float, started: bool, n_baskets: int) -> bool:
        """A tick used the tracker (``started``: it started it) in ``seconds``; False when
        the tracker should be dropped, its ticks costing more than a full mine."""
        self.credit = 0.0
        if started:
            self.start = seconds
            return True
        self.tracked = _average(self.tracked, seconds)
        if self.full_per_basket is not None and self.tracked > self.full_per_basket * max(n_baskets, 1):
            self.patience *= 2
            return False
        return True


def _average(old: float | None, new: float) -> float:
    return new if old is None else (1 - SMOOTHING) * old + SMOOTHING * new
