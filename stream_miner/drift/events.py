"""What the drift detector reports: events (a pattern emerged or faded) and pattern states."""

from __future__ import annotations

from dataclasses import dataclass

from stream_miner.engine.rules import Rule

Names = tuple[str, ...]
EMERGED, FADED = "emerged", "faded"
RISING, ACTIVE, FALLING = "rising", "active", "falling"


class _Share:
    """A count over a window of ``n_baskets``: ``support`` is its share (0 for no window)."""

    count: int
    n_baskets: int

    @property
    def support(self) -> float:
        return self.count / self.n_baskets if self.n_baskets else 0.0


@dataclass(frozen=True)
class Baseline(_Share):
    """A pattern's figures in the baseline window. ``exact`` is False when the itemset was
    below the support threshold there: ``count`` is then the largest count it could have had
    (threshold - 1), and confidence and lift are unknown (None)."""

    count: int
    n_baskets: int
    confidence: float | None
    lift: float | None
    exact: bool


@dataclass(frozen=True)
class WindowInfo:
    """The window at the tick of an event: its size, the ids of its oldest and newest basket
    (None when baskets carry no id) and its end in event time (None for a count window)."""

    size: int
    first_id: str | None
    last_id: str | None
    end_time: float | None


@dataclass(frozen=True)
class DriftEvent(_Share):
    """One change: the pattern ``items`` emerged or faded at tick ``tick``.

    ``rules`` are the pattern's rules that pass the thresholds now (for a faded pattern: its
    rules when it was last active); ``count``/``n_baskets`` its support now; ``p_value`` the
    adjusted evidence that the change is real (see :mod:`stream_miner.drift.significance`).
    ``id`` is deterministic (kind, tick and items), so a reader can drop a repeat."""

    kind: str
    id: str
    tick: int
    items: Names
    rules: tuple[Rule, ...]
    count: int
    n_baskets: int
    baseline: Baseline
    p_value: float
    window: WindowInfo

    def as_json(self) -> dict[str, object]:
        """The event as one JSON-ready object (the schema in the README)."""
        return {
            "event": self.kind,
            "id": self.id,
            "tick": self.tick,
            "items": list(self.items),
            "rules": [
                {
                    "antecedent": list(rule.antecedent),
                    "consequent": list(rule.consequent),
                    "support": rule.support,
                    "confidence": rule.confidence,
                    "lift": rule.lift,
                }
                for rule in self.rules
            ],
            "support": self.support,
            "count": self.count,
            "baseline": {
                "support": self.baseline.support,
                "confidence": self.baseline.confidence,
                "lift": self.baseline.lift,
                "count": self.baseline.count,
                "size": self.baseline.n_baskets,
                "exact": self.baseline.exact,
            },
            "p_value": self.p_value,
            "window": {
                "size": self.window.size,
                "first_id": self.window.first_id,
                "last_id": self.window.last_id,
                "end_time": self.window.end_time,
            },
        }


@dataclass(frozen=True)
class PatternStatus(_Share):
    """A tracked pattern now: its lifecycle state (rising, active or falling), its support
    (count over the window) and its best rule's confidence and lift."""

    items: Names
    state: str
    count: int
    n_baskets: int
    confidence: float
    lift: float
