"""Seeded random streams.

All randomness in fieldplan flows from one integer seed. Each block (or stratum,
or other named unit of work) gets its own :class:`numpy.random.Generator`
derived from the seed and a stable key, so the draw for a block does not depend
on the order blocks are processed in, nor on how work is split over processes.
"""

from __future__ import annotations

import hashlib

import numpy as np

__all__ = ["stream", "key_words"]


def key_words(key: str) -> list[int]:
    """Turn a text key into 32-bit words for :class:`numpy.random.SeedSequence`.

    Python's ``hash`` is salted per process, so a cryptographic digest is used
    to keep keys stable across runs and machines.
    """
    digest = hashlib.sha256(key.encode("utf-8")).digest()
    return [int.from_bytes(digest[i : i + 4], "little") for i in range(0, 16, 4)]


def stream(seed: int, *keys: str) -> np.random.Generator:
    """Return the generator for ``keys`` under ``seed``.

    Parameters
    ----------
    seed : int
        The plan's seed (``--seed``), a non-negative integer.
    *keys : str
        Names of the unit of work, e.g. ``("grid-start", "B07")``.

    Examples
    --------
    >>> a = stream(7, "block", "B01").random()
    >>> b = stream(7, "block", "B01").random()
    >>> a == b
    True
    """
    if seed < 0:
        raise ValueError(f"seed must be a non-negative integer, got {seed}")
    words = [int(seed) & 0xFFFFFFFF, int(seed) >> 32]
    for key in keys:
        words.extend(key_words(key))
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence(words)))
