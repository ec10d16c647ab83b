"""Replace a file atomically: readers, and a crash at any moment, see the old content or the
new, never a mix. Temporary files sit beside the target as ``.NAME.*.tmp``."""

from __future__ import annotations

import contextlib
import os
from collections.abc import Callable
from pathlib import Path
from typing import BinaryIO

TEMP_SUFFIX = ".tmp"


def temp_prefix(target: Path) -> str:
    """Prefix of the temporary files written for ``target``."""
    return f".{target.name}."


def replace_atomically(path: str | os.PathLike, write: Callable[[BinaryIO], object]) -> Path:
    """Write a temporary file beside ``path`` with ``write``, fsync it, rename it onto ``path``,
    then fsync the directory so the rename itself is durable."""
    import tempfile  # here, not at the top: `mine` never writes atomically and starts quicker

    target = Path(path)
    fd, temporary = tempfile.mkstemp(prefix=temp_prefix(target), suffix=TEMP_SUFFIX, dir=target.parent)
    try:
        with os.fdopen(fd, "wb") as handle:
            write(handle)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(temporary, target)
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(temporary)
        raise
    fsync_directory(target.parent)
    return target


def write_text_atomically(path: str | os.PathLike, text: str) -> None:
    """:func:`replace_atomically` with UTF-8 text."""
    replace_atomically(path, lambda handle: handle.write(text.encode("utf-8")))


def remove_stale_temporaries(path: str | os.PathLike) -> None:
    """Delete temporary files that a crash left beside ``path`` (one writer per file assumed)."""
    target = Path(path)
    for stale in target.parent.glob(f"{temp_prefix(target)}*{TEMP_SUFFIX}"):
        with contextlib.suppress(OSError):
            stale.unlink()


def fsync_directory(directory: Path) -> None:
    """Make a rename in ``directory`` durable (POSIX); where directories cannot be opened, skip."""
    try:
        fd = os.open(directory, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
    except OSError:
        return
    try:
        os.fsync(fd)
    finally:
        os.close(fd)
