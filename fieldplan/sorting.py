"""Natural order of block ids and other labels: ``Blk 1, Blk 2, Blk 10`` (not ``Blk 1, Blk 10, Blk 2``).

Every list of block ids a person reads (tables, legends, messages) uses this order.
"""

from __future__ import annotations

import re
from collections.abc import Iterable

__all__ = ["natural_key", "natural_sorted", "natural_order"]

_DIGITS = re.compile(r"\d+")
# Digit runs are padded to this width so that text comparison orders them as numbers.
_WIDTH = 24


def _pad(match: re.Match) -> str:
    return match.group().lstrip("0").rjust(_WIDTH, "0")


def natural_key(value: object) -> tuple[str, str]:
    """Sort key: case-folded text with digit runs compared as numbers (``"B10"`` after ``"b9"``).

    Digit runs are zero-padded to a fixed width (one regex substitution per value,
    cheap for thousands of ids). Ties (``"B01"`` and ``"B1"``, ``"a"`` and ``"A"``)
    fall back to the plain text, so the order is total and the same on every run.

    Examples
    --------
    >>> sorted(["Blk 10", "Blk 2", "blk 1"], key=natural_key)
    ['blk 1', 'Blk 2', 'Blk 10']
    """
    text = "" if value is None else str(value)
    return (_DIGITS.sub(_pad, text.casefold()), text)


def natural_sorted(values: Iterable) -> list:
    """``values`` in natural order (see :func:`natural_key`)."""
    return sorted(values, key=natural_key)


def natural_order(values) -> list[int]:
    """Positions that put ``values`` in natural order (a stable argsort)."""
    values = list(values)
    return sorted(range(len(values)), key=lambda i: natural_key(values[i]))
