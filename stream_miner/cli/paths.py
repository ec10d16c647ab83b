"""Output paths: checked before a run starts, and opened (one-line errors)."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import TypeVar

from stream_miner.cli.options import UsageError

T = TypeVar("T")


def check_output_file(path: Path, option: str) -> None:
    """``path`` can be created or replaced: it is not a directory, and a file can be made
    beside it (where the atomic replace writes its temporary file)."""
    if path.is_dir():
        raise UsageError(f"{option} {str(path)!r} is a directory, not a file")
    directory = path.parent
    if not directory.is_dir():
        raise UsageError(f"{option} {str(path)!r}: the directory {str(directory)!r} does not exist")
    _try_writing_in(directory, option, path)


def check_directory(path: Path, option: str) -> None:
    """``path`` is, or can be made, a directory where files can be written (made if missing)."""
    try:
        path.mkdir(parents=True, exist_ok=True)
    except FileExistsError:
        raise UsageError(f"{option} {str(path)!r} is a file, not a directory") from None
    except OSError as error:
        raise UsageError(f"{option} {str(path)!r}: cannot create it ({error.strerror})") from None
    _try_writing_in(path, option, path)


def _try_writing_in(directory: Path, option: str, shown: Path) -> None:
    import tempfile  # here, not at the top: `mine` without outputs starts quicker

    try:
        with tempfile.TemporaryFile(dir=directory):
            pass
    except OSError as error:
        raise UsageError(f"{option} {str(shown)!r}: cannot write there ({error.strerror})") from None


def open_output(target: str, option: str, to_kafka: Callable[[str], T], to_file: Callable[[str], T]) -> T:
    """The sink ``option`` names: ``to_kafka`` for a kafka:// address, else ``to_file``; a
    file that cannot be opened is a one-line usage error."""
    if target.startswith("kafka://"):
        return to_kafka(target)
    try:
        return to_file(target)
    except OSError as error:
        raise UsageError(f"{option} {target!r}: cannot open it ({error.strerror})") from None
