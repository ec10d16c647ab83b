"""Checks and exact normalisation of values handed to the public API.

Every refusal is a one-line ``ValueError`` that names the parameter.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Iterable
from decimal import Decimal
from fractions import Fraction

Exact = Fraction | Decimal | int | float | str  # what a fraction parameter accepts


def _label(name: str) -> str:
    """``min_support`` -> ``min support (min_support)``: readable, and the exact name."""
    return f"{name.replace('_', ' ')} ({name})" if "_" in name else name


def exact_fraction(value: object, name: str) -> Fraction:
    """``value`` as an exact Fraction. A float converts through its shortest decimal form,
    so ``0.07`` is 7/100; strings may be decimals (``"0.07"``) or ratios (``"7/100"``).

    >>> exact_fraction(0.07, "min_support"), exact_fraction("7/100", "min_support")
    (Fraction(7, 100), Fraction(7, 100))
    """
    if isinstance(value, bool):
        raise ValueError(f"{_label(name)} must be a number, not a bool")
    if isinstance(value, numbers.Integral):
        return Fraction(int(value))
    if isinstance(value, numbers.Rational):
        return Fraction(int(value.numerator), int(value.denominator))
    if isinstance(value, Decimal | numbers.Real):
        if not (value.is_finite() if isinstance(value, Decimal) else math.isfinite(value)):
            raise ValueError(f"{_label(name)} must be a finite number, got {value}")
        return Fraction(value) if isinstance(value, Decimal) else Fraction(str(value))
    if isinstance(value, str):
        try:
            return Fraction(value.strip())
        except (ValueError, ZeroDivisionError):
            raise ValueError(
                f"{_label(name)} must be a number such as 0.07 or 7/100, got {value!r}"
            ) from None
    raise ValueError(f"{_label(name)} must be a number, got {type(value).__name__}")


def bounded_fraction(value: object, name: str, *, zero: bool, up_to_one: bool) -> Fraction:
    """:func:`exact_fraction` of ``value``, refused when negative, zero (unless ``zero``) or
    above 1 (when ``up_to_one``)."""
    fraction = exact_fraction(value, name)
    if fraction < 0 or (fraction == 0 and not zero) or (up_to_one and fraction > 1):
        bounds = ("[0" if zero else "(0") + (", 1]" if up_to_one else ", inf)")
        raise ValueError(f"{_label(name)} must lie in {bounds}, got {fraction}")
    return fraction


def whole_number(value: object, name: str) -> int:
    """``value`` as an int of at least 1; bools and floats are refused."""
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise ValueError(f"{_label(name)} must be a whole number, got {type(value).__name__} {value!r}")
    if value < 1:
        raise ValueError(f"{_label(name)} must be at least 1, got {value}")
    return int(value)


def optional_whole_number(value: object, name: str) -> int | None:
    """None, or :func:`whole_number` of ``value`` (at least 1)."""
    return None if value is None else whole_number(value, name)


def item_names(value: object, name: str) -> frozenset[str]:
    """An iterable of item names as a frozenset; a bare string is refused."""
    if isinstance(value, str | bytes | bytearray):
        raise ValueError(f"{_label(name)}: give a list of item names, not a string")
    if not isinstance(value, Iterable):
        raise ValueError(f"{_label(name)} must be a list of item names, got {type(value).__name__}")
    items = list(value)
    for item in items:
        if not isinstance(item, str):
            raise ValueError(f"{_label(name)} must hold item names (str), got a {type(item).__name__}")
    return frozenset(items)
