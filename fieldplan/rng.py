"""Seeded random streams.

All randomness in fieldplan flows from one integer seed. Each block (or stratum,
or other named unit of work) gets its own :class:`numpy.random.Generator`
derived from the seed and a stable key, so the draw for a block does not depend
on the order blocks are processed in, nor on how work is split over processes.

:func:`streams` gives the generators of many keys at once: the same generators
as :func:`stream`, with the seed-sequence mixing done in numpy over all keys
(building a :class:`numpy.random.SeedSequence` per key costs more than drawing
from it for a plan of a thousand blocks).
"""

from __future__ import annotations

import hashlib
from collections.abc import Sequence
from functools import lru_cache

import numpy as np
from numpy.random.bit_generator import ISpawnableSeedSequence

__all__ = ["stream", "streams", "key_words"]

# Constants of numpy's SeedSequence (O'Neill's seed_seq alternative), which
# streams() reproduces word for word.
_POOL = 4
_INIT_A, _MULT_A = 0x43B0D7E5, 0x931E8875
_INIT_B, _MULT_B = 0x8B51F9DD, 0x58F38DED
_MIX_L, _MIX_R = 0xCA01F9DD, 0x4973F715
_MASK = 0xFFFFFFFF


@lru_cache(maxsize=4096)
def _digest_words(key: str) -> tuple[int, ...]:
    digest = hashlib.sha256(key.encode("utf-8")).digest()
    return tuple(int.from_bytes(digest[i : i + 4], "little") for i in range(0, 16, 4))


def key_words(key: str) -> list[int]:
    """Turn a text key into 32-bit words for :class:`numpy.random.SeedSequence`.

    Python's ``hash`` is salted per process, so a cryptographic digest is used
    to keep keys stable across runs and machines.
    """
    return list(_digest_words(key))


def _seed_words(seed: int) -> list[int]:
    if seed < 0:
        raise ValueError(f"seed must be a non-negative integer, got {seed}")
    return [int(seed) & 0xFFFFFFFF, int(seed) >> 32]


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
    words = _seed_words(seed)
    for key in keys:
        words.extend(_digest_words(key))
    return np.random.Generator(np.random.PCG64(np.random.SeedSequence(words)))


def _hash_consts(start: int, mult: int, n: int) -> list[int]:
    """The multiplier a seed-sequence hash uses at each of its ``n`` steps."""
    out, h = [], start
    for _ in range(n):
        out.append(h)
        h = (h * mult) & _MASK
    return out


def _hashmix(value: np.ndarray, const: int, nxt: int) -> np.ndarray:
    value = value ^ np.uint32(const)
    value = value * np.uint32(nxt)
    return value ^ (value >> np.uint32(16))


def _mix(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    r = np.uint32(_MIX_L) * x - np.uint32(_MIX_R) * y
    return r ^ (r >> np.uint32(16))


def _pools(entropy: np.ndarray) -> np.ndarray:
    """:class:`numpy.random.SeedSequence`'s entropy pool of each row of ``entropy`` (uint32, width >= 4)."""
    n, width = entropy.shape
    steps = _POOL + _POOL * (_POOL - 1) + (width - _POOL) * _POOL
    # The hash multiplier moves on at every hashed word, whatever the word: one list for all rows.
    consts = _hash_consts(_INIT_A, _MULT_A, steps + 1)
    hc = iter(zip(consts[:-1], consts[1:], strict=True))
    pool = np.empty((n, _POOL), dtype=np.uint32)
    for i in range(_POOL):
        pool[:, i] = _hashmix(entropy[:, i], *next(hc))
    for src in range(_POOL):
        for dst in range(_POOL):
            if src != dst:
                pool[:, dst] = _mix(pool[:, dst], _hashmix(pool[:, src], *next(hc)))
    for src in range(_POOL, width):
        for dst in range(_POOL):
            pool[:, dst] = _mix(pool[:, dst], _hashmix(entropy[:, src], *next(hc)))
    return pool


def _states(pool: np.ndarray, n_words: int) -> np.ndarray:
    """``SeedSequence.generate_state(n_words, uint32)`` of each pool row."""
    hc = _hash_consts(_INIT_B, _MULT_B, n_words + 1)
    out = np.empty((pool.shape[0], n_words), dtype=np.uint32)
    for i in range(n_words):
        out[:, i] = _hashmix(pool[:, i % pool.shape[1]], hc[i], hc[i + 1])
    return out


class _MixedSeed(ISpawnableSeedSequence):
    """A :class:`numpy.random.SeedSequence` whose entropy pool was mixed in bulk by :func:`streams`.

    It gives the same state words as ``SeedSequence(entropy)``; the 64-bit words a
    PCG64 asks for are handed over ready-made.
    """

    __slots__ = ("entropy", "pool", "_pcg")

    def __init__(self, entropy: list[int], pool: np.ndarray, pcg: np.ndarray) -> None:
        self.entropy = entropy
        self.pool = pool
        self._pcg = pcg

    def generate_state(self, n_words: int, dtype: object = np.uint32) -> np.ndarray:
        out_dtype = np.dtype(dtype)
        if out_dtype == np.dtype(np.uint64) and n_words == self._pcg.size:
            return self._pcg.copy()
        if out_dtype not in (np.dtype(np.uint32), np.dtype(np.uint64)):
            raise ValueError("only support uint32 or uint64")
        wide = out_dtype == np.dtype(np.uint64)
        state = _states(self.pool[None, :], n_words * (2 if wide else 1))[0]
        return state.astype("<u4").view("<u8").astype(np.uint64) if wide else state

    def spawn(self, n_children: int) -> list[np.random.SeedSequence]:
        return np.random.SeedSequence(self.entropy).spawn(n_children)


def streams(seed: int, prefix: Sequence[str], names: Sequence[str]) -> list[np.random.Generator]:
    """The generators ``[stream(seed, *prefix, name) for name in names]``, seeded in bulk.

    Each generator draws exactly the numbers :func:`stream` gives it; only the
    seed-sequence mixing (and the key digests) is shared out over all names.

    Examples
    --------
    >>> a = streams(7, ("design",), ["B01", "B02"])[1].random()
    >>> a == stream(7, "design", "B02").random()
    True
    """
    head = _seed_words(seed)
    for key in prefix:
        head.extend(_digest_words(key))
    names = [str(name) for name in names]
    if not names:
        return []
    if head[1] > _MASK:
        # Seeds past 64 bits take more than one word each: the plain path handles them.
        return [stream(seed, *prefix, name) for name in names]
    tails = np.array([_digest_words(name) for name in names], dtype=np.uint32).reshape(len(names), 4)
    entropy = np.concatenate(
        [np.broadcast_to(np.array(head, dtype=np.uint32), (len(names), len(head))), tails], 1
    )
    pool = _pools(entropy)
    pcg = _states(pool, 8).astype("<u4").view("<u8").astype(np.uint64)
    head_list = list(head)
    out = []
    for j, tail in enumerate(tails.tolist()):
        seq = _MixedSeed(head_list + tail, pool[j], pcg[j])
        out.append(np.random.Generator(np.random.PCG64(seq)))
    return out
