"""Natural order of block ids and other labels: ``Blk 1, Blk 2, Blk 10`` (not ``Blk 1, Blk 10, Blk 2``).

Every list of block ids a person reads (tables, legends, messages) uses this order.
"""

from __future__ import annotations

import re
from collections.abc import Iterable

__all__ = ["natural_key", "natural_sorted", "natural_order"]

_DIGITS = re.compile(r"(\d+)")


def natural_key(value: object) -> tuple:
    """Sort key: text parts case-folded, digit runs as numbers (``"B10"`` after ``"b9"``).

    Ties (``"B01"`` and ``"B1"``, ``"a"`` and ``"A"``) fall back to the plain text, so the
    order is total and the same on every run.

    Examples
    --------
    >>> sorted(["Blk 10", "Blk 2", "blk 1"], key=natural_key)
    ['blk 1', 'Blk 2', 'Blk 10']
    """
    text = "" if value is None else str(value)
    parts = _DIGITS.split(text)
    # Pairs keep numbers and texts from being compared with each other.
    key = tuple((0, int(p), "") if i % 2 else (1, 0, p.casefold()) for i, p in enumerate(parts) if p != "")
    return (key, text)


def natural_sorted(values: Iterable) -> list:
    """``values`` in natural order (see :func:`natural_key`)."""
    return sorted(values, key=natural_key)


def natural_order(values) -> list[int]:
    """Positions that put ``values`` in natural order (a stable argsort)."""
    values = list(values)
    return sorted(range(len(values)), key=lambda i: natural_key(values[i]))
