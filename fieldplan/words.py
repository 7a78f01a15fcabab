"""Counts in messages: ``1 block``, ``2 blocks`` (never ``1 blocks``)."""

from __future__ import annotations

__all__ = ["plural"]

_IRREGULAR = {"fruit": "fruit", "series": "series"}


def plural(count: int, noun: str, plural_form: str | None = None) -> str:
    """``count`` and ``noun`` in the right number.

    Examples
    --------
    >>> plural(1, "block"), plural(3, "block"), plural(2, "berry"), plural(0, "point")
    ('1 block', '3 blocks', '2 berries', '0 points')
    """
    count = int(count)
    if count == 1:
        word = noun
    elif plural_form is not None:
        word = plural_form
    elif noun in _IRREGULAR:
        word = _IRREGULAR[noun]
    elif noun.endswith(("s", "x", "ch", "sh")):
        word = noun + "es"
    elif noun.endswith("y") and noun[-2:-1] not in tuple("aeiou"):
        word = noun[:-1] + "ies"
    else:
        word = noun + "s"
    return f"{count:,} {word}"
