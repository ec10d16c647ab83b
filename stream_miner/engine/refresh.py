"""How a tick refreshes its result: by the tracked border, by a full mine, or by whichever
measured costs say is cheaper (the default).

The adaptive choice keeps moving averages of what a tick costs without the tracker (a full
mine plus keeping the prefix tree up to date since the previous tick, which a tracked tick
leaves behind), of a tracked tick and of what starting the tracking cost. A full mine's cost
follows its output more than the window's size (the support is a share of the window), so
it is not scaled by the window. Without a tracker, ticks mine in full and bank, at each, the
time a tracker would have saved; the tracking starts once that credit covers its expected
start (the ski-rental rule: what is spent waiting is at most about what the start costs;
before a start was measured, it is expected to cost one full tick). The same rule drops a
tracker: tracked ticks bank what they cost beyond a full tick (cheaper ones pay it back), and
once that debit exceeds a start the tracker goes, so a single slow tick (big baskets, a
burst) does not throw away a tracker that pays on the whole. A dropped tracker, or one that
the window's turnover between two ticks throws away, doubles the credit needed for the next
start, so data on which tracking never pays costs a few starts at most.
"""

from __future__ import annotations

from enum import StrEnum

SMOOTHING = 0.3  # weight of the newest measurement in the moving averages
FIRST_START_IN_FULL_MINES = 1.0  # expected start before one was measured, in full ticks


class Refresh(StrEnum):
    """How ticks refresh their result (the same result in every mode)."""

    ADAPTIVE = "adaptive"  # whichever measured costs say is cheaper
    FULL = "full"  # mine the whole window at every tick
    TRACKED = "tracked"  # always update the tracked border


class RefreshChooser:
    """Picks, tick by tick, between the tracked border and a full mine from measured costs."""

    def __init__(self) -> None:
        self.full: float | None = None  # seconds of a full tick: the mine and the tree's upkeep
        self.tracked: float | None = None  # seconds of a tracked tick
        self.start: float | None = None  # seconds the last start of the tracking took
        self.credit = 0.0  # seconds a tracker would have saved since the last decision
        self.debit = 0.0  # seconds tracked ticks cost beyond full ticks, net, since the start
        self.patience = 1.0  # the credit a start needs, in expected starts

    def track(self, tracking: bool) -> bool:
        """Whether the next tick should use the tracker (``tracking``: one runs), starting
        it if none runs."""
        if tracking:
            return True
        if self.full is None:
            return False  # measure a full mine first
        return self.credit >= self.patience * self._expected_start()

    def _expected_start(self) -> float:
        full = self.full or 0.0
        return FIRST_START_IN_FULL_MINES * full if self.start is None else self.start

    def full_mined(self, seconds: float, upkeep: float) -> None:
        """A tick mined the window in full in ``seconds``, after ``upkeep`` seconds keeping
        the tree up to date since the previous tick."""
        cost = seconds + upkeep
        self.full = _average(self.full, cost)
        self.credit += max(0.0, cost - (self.tracked or 0.0))

    def tracked_tick(self, seconds: float, started: bool) -> bool:
        """A tick used the tracker (``started``: it started it) in ``seconds``; False when
        the tracker should be dropped, its ticks having cost more than a start beyond full
        ticks."""
        self.credit = 0.0
        if started:
            self.start, self.debit = seconds, 0.0
            return True
        self.tracked = _average(self.tracked, seconds)
        if self.full is None:
            return True
        self.debit = max(0.0, self.debit + seconds - self.full)
        if self.debit > self._expected_start():
            self.patience *= 2
            return False
        return True

    def turned_over(self) -> None:
        """The window changed so much between two ticks that the tracker was thrown away:
        its start was wasted, so the next one must wait longer."""
        self.patience *= 2


def _average(old: float | None, new: float) -> float:
    return new if old is None else (1 - SMOOTHING) * old + SMOOTHING * new
