"""Guards for long or huge mines: result caps and a cooperative interrupt.

A mine refuses a result larger than its cap (:class:`ResultTooLarge`) as soon as the size is
known to exceed it, before the itemsets or rules are listed. A mine given a
:class:`threading.Event` checks it between small steps of work (well under 50 ms apart) and
stops with :class:`MiningInterrupted` once it is set, e.g. by a signal handler while a tick
runs on a worker thread.
"""

from __future__ import annotations

import threading

DEFAULT_MAX_ITEMSETS = 1_000_000  # itemsets a mine may report, unless told otherwise
DEFAULT_MAX_RULES_TOTAL = 1_000_000  # rules that may pass a rule filter, unless told otherwise


class ResultTooLarge(ValueError):
    """A mine would report more itemsets or rules than its cap allows.

    ``found`` is a lower bound of the full count (at least this many), ``cap`` the limit.
    """

    def __init__(self, what: str, found: int, cap: int, advice: str) -> None:
        super().__init__(
            f"the result would hold at least {found:,} {what}, more than the cap of {cap:,}; {advice}"
        )
        self.found = found
        self.cap = cap


class MiningInterrupted(Exception):
    """A mine stopped early because its interrupt event was set; the miner stays usable."""


def stop_if_set(interrupt: threading.Event | None) -> None:
    """Raise :class:`MiningInterrupted` when ``interrupt`` is set."""
    if interrupt is not None and interrupt.is_set():
        raise MiningInterrupted("mining interrupted")


def too_many_itemsets(found: int, cap: int) -> ResultTooLarge:
    """The error for a mine with at least ``found`` itemsets over ``cap``."""
    return ResultTooLarge("itemsets", found, cap, "raise --min-support or set --max-size")


def too_many_rules(found: int, cap: int) -> ResultTooLarge:
    """The error for at least ``found`` rules passing the filter over ``cap``."""
    return ResultTooLarge("rules", found, cap, "raise --min-confidence or --min-support, or set --max-size")
