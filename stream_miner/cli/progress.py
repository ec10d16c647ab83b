"""A progress line on stderr while a long file is read, shown only on a terminal."""

from __future__ import annotations

import os
import sys
import time
from typing import IO, TextIO


class Progress:
    """Rewrites one stderr line with the share of ``source`` read so far."""

    def __init__(self, source: IO[bytes], label: str, out: TextIO = sys.stderr, every: float = 0.5):
        self._source = source
        self._label = label
        self._out = out
        self._every = every
        self._total = _size_of(source)
        self._enabled = self._total > 0 and out.isatty()
        self._next = time.monotonic() + every
        self._shown = False

    def update(self, baskets: int) -> None:
        """Call once per record; redraws at most every ``every`` seconds."""
        if not self._enabled or baskets & 1023:
            return
        now = time.monotonic()
        if now < self._next:
            return
        self._next = now + self._every
        share = min(1.0, self._source.tell() / self._total)
        self._out.write(f"\r{self._label}: {share:6.1%} read, {baskets:,} records")
        self._out.flush()
        self._shown = True

    def close(self) -> None:
        """Clear the progress line."""
        if self._shown:
            self._out.write("\r\033[K")
            self._out.flush()


def _size_of(source: IO[bytes]) -> int:
    try:
        return os.fstat(source.fileno()).st_size
    except (OSError, AttributeError, ValueError):
        return 0
