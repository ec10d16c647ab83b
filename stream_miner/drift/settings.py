"""How the drift detector decides: its settings, apart from the detector so that the command
line can describe and check them without loading the mining engine."""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction

from stream_miner.drift.baseline import POLICIES

MAX_PATTERN_SIZE = 8  # the hard cap on ``max_size``: checking a pattern's splits costs 2^size


@dataclass(frozen=True)
class DriftSettings:
    """How the detector decides. ``min_confidence`` and ``min_lift`` are the enter thresholds
    of a pattern's rules (the support threshold is the tick's own); the exit thresholds are
    ``exit_fraction`` of them (lift: 1 + fraction x (lift - 1)). ``baseline`` is a policy of
    :mod:`stream_miner.drift.baseline` (``half_life`` in windows, for ``decayed``)."""

    min_confidence: Fraction = Fraction(0)
    min_lift: Fraction = Fraction(1)
    exit_fraction: Fraction = Fraction(4, 5)
    confirm_ticks: int = 2
    false_discovery_rate: float = 0.001
    baseline: str = "previous"
    half_life: float = 4.0
    max_size: int = 4

    def __post_init__(self) -> None:
        object.__setattr__(self, "min_confidence", Fraction(self.min_confidence))
        object.__setattr__(self, "min_lift", Fraction(self.min_lift))
        object.__setattr__(self, "exit_fraction", Fraction(self.exit_fraction))
        if not 0 < self.exit_fraction <= 1:
            raise ValueError(f"the exit fraction must lie in (0, 1], got {float(self.exit_fraction)}")
        if not 0 <= self.min_confidence <= 1 or self.min_lift < 0:
            raise ValueError("min_confidence must lie in [0, 1] and min_lift must not be negative")
        if (
            isinstance(self.confirm_ticks, bool)
            or not isinstance(self.confirm_ticks, int)
            or self.confirm_ticks < 1
        ):
            raise ValueError(
                f"confirm ticks must be a whole number of at least 1, got {self.confirm_ticks!r}"
            )
        if not 0 < self.false_discovery_rate < 1:
            raise ValueError(f"the false discovery rate must lie in (0, 1), got {self.false_discovery_rate}")
        if self.baseline not in POLICIES:
            raise ValueError(f"unknown baseline {self.baseline!r}; choose from {', '.join(POLICIES)}")
        if not self.half_life > 0:
            raise ValueError(f"the half-life must be positive, got {self.half_life}")
        if not 2 <= self.max_size <= MAX_PATTERN_SIZE:
            raise ValueError(f"the pattern size must lie in [2, {MAX_PATTERN_SIZE}], got {self.max_size}")
