"""Replace a file atomically: readers see the old content or the new, never a mix."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path


def write_text_atomically(path: str | os.PathLike, text: str) -> None:
    """Write ``text`` to a temporary file beside ``path``, fsync it, rename it onto ``path``."""
    target = Path(path)
    fd, temporary = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent or ".")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as out:
            out.write(text)
            out.flush()
            os.fsync(out.fileno())
        os.replace(temporary, target)
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise
