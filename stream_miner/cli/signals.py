"""SIGTERM and SIGINT ask the run loop to stop; the previous handlers come back afterwards."""

from __future__ import annotations

import signal
from collections.abc import Callable, Iterator
from contextlib import contextmanager

STOP_SIGNALS = (signal.SIGTERM, signal.SIGINT)


@contextmanager
def stop_on_signals(stop: Callable[[], None]) -> Iterator[list[int]]:
    """Call ``stop`` on SIGTERM or SIGINT; yields the list of signals received."""
    received: list[int] = []

    def handle(signum: int, _frame: object) -> None:
        received.append(signum)
        stop()

    previous = {sig: signal.signal(sig, handle) for sig in STOP_SIGNALS}
    try:
        yield received
    finally:
        for sig, handler in previous.items():
            signal.signal(sig, handler)
