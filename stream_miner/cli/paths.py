"""Checks, before a run starts, that every output path can be written (one-line errors)."""

from __future__ import annotations

from pathlib import Path

from stream_miner.cli.options import UsageError


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
