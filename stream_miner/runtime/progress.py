"""A progress line on a terminal while the input is read (never in logs or pipes)."""

from __future__ import annotations

import time
from collections.abc import Callable
from typing import TextIO

REDRAW_EVERY = 0.5  # seconds


class ProgressLine:
    """Rewrites one line of ``out`` with the source's position and the baskets taken so far;
    does nothing unless ``out`` is a terminal."""

    def __init__(self, out: TextIO) -> None:
        self._out = out
        self._enabled = out.isatty()
        self._next = time.monotonic() + REDRAW_EVERY
        self._shown = False

    def update(self, position: Callable[[], str | None], consumed: int) -> None:
        """Redraw at most every ``REDRAW_EVERY`` seconds."""
        if not self._enabled or time.monotonic() < self._next:
            return
        self._next = time.monotonic() + REDRAW_EVERY
        where = position()
        text = f"{consumed:,} baskets" + (f", {where}" if where else "")
        self._out.write(f"\r\033[Kstream-miner: {text}")
        self._out.flush()
        self._shown = True

    def close(self) -> None:
        """Clear the line (before any other output)."""
        if self._shown:
            self._out.write("\r\033[K")
            self._out.flush()
            self._shown = False
