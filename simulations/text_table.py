"""Aligned plain-text tables for the simulations' printouts."""

from __future__ import annotations

from collections.abc import Sequence


def text_table(cells: Sequence[Sequence[str]], *, first_left: bool = False, rule: bool = False) -> list[str]:
    """The rows of ``cells`` (the first is the header) with columns padded to one width, right
    aligned (the first column left aligned with ``first_left``), and a line of dashes under
    the header with ``rule``."""
    widths = [max(len(row[k]) for row in cells) for k in range(len(cells[0]))]
    lines = [
        "  ".join(
            cell.ljust(width) if first_left and k == 0 else cell.rjust(width)
            for k, (cell, width) in enumerate(zip(row, widths, strict=True))
        )
        for row in cells
    ]
    if rule:
        lines.insert(1, "  ".join("-" * width for width in widths))
    return lines
