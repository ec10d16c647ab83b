"""Basket hygiene: repeated items, oversized and empty baskets."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from enum import StrEnum


class Oversize(StrEnum):
    """What happens to a basket with more distinct items than the cap."""

    SKIP = "skip"
    TRUNCATE = "truncate"


class Verdict(StrEnum):
    """Outcome of cleaning one basket."""

    ACCEPTED = "accepted"
    TRUNCATED = "truncated"
    SKIPPED_OVERSIZE = "skipped_oversize"
    SKIPPED_EMPTY = "skipped_empty"


DEFAULT_MAX_BASKET_ITEMS = 1000


@dataclass(frozen=True)
class BasketPolicy:
    """How raw baskets become windowed baskets.

    - Repeated items count once (membership only; quantities are ignored).
    - A basket with more than ``max_items`` distinct items is skipped, or with
      ``oversize=TRUNCATE`` keeps its first ``max_items`` distinct items in input order.
    - An empty basket (no items at all) carries no co-purchase information: it is not
      added to the window and therefore does not count towards the window size N.
    Every skip or truncation is reported through :class:`Verdict` so callers can count it.
    """

    max_items: int = DEFAULT_MAX_BASKET_ITEMS
    oversize: Oversize = Oversize.SKIP

    def __post_init__(self) -> None:
        if self.max_items < 1:
            raise ValueError(f"max_items must be at least 1, got {self.max_items}")
        object.__setattr__(self, "oversize", Oversize(self.oversize))

    def clean(self, items: Sequence[int]) -> tuple[list[int], Verdict]:
        """Deduplicate ``items`` keeping first-seen order and apply the size cap."""
        distinct = list(dict.fromkeys(items))
        if not distinct:
            return distinct, Verdict.SKIPPED_EMPTY
        if len(distinct) <= self.max_items:
            return distinct, Verdict.ACCEPTED
        if self.oversize is Oversize.SKIP:
            return [], Verdict.SKIPPED_OVERSIZE
        return distinct[: self.max_items], Verdict.TRUNCATED
