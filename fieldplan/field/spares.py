"""Spare points kept in draw order, so the first ``n + j`` points are still a valid design.

A plan with spares draws ``n + K`` points per stratum and keeps them in an order
whose every prefix is itself a sample of the design: the first ``n`` are
``selected``, the rest are ``spare`` with ``spare_rank`` 1..K. When a selected
point cannot be reached, the spare with the lowest rank still unused takes its
place, so the points actually visited are always a prefix of the order.

* Simple random sampling: the draw order is the order of independent uniform
  draws, so any prefix of ``n + j`` points is a simple random sample of size
  ``n + j`` (definition of SRS: every subset of that size equally likely).
* Spatially balanced designs: the ``n + K`` balanced points are put in
  reverse hierarchical order (Stevens & Olsen 2004, *JASA* 99:262-278): a
  randomised quadtree address orders the points along a quadrant-recursive
  curve, and reading that order by digit-reversed position visits one point in
  each top-level quadrant before a second one in any, so prefixes stay spread.
  Limits: the ``n + K`` set carries the balanced method's inclusion
  probabilities exactly; a prefix is well spread but its inclusion
  probabilities are equal only approximately (exactly so for a GRTS draw, which
  the property was proved for).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = [
    "SELECTED",
    "SPARE",
    "split_draw",
    "srs_indices",
    "quadtree_addresses",
    "reverse_hierarchical_order",
    "balanced_order",
    "SPARE_DESIGNS",
    "order_draw",
]

#: Designs whose draw can carry spares, and the ordering each uses.
SPARE_DESIGNS = {
    "random": "draw order (independent uniform draws)",
    "clusters": "draw order (plants picked one after another at random)",
    "balanced": "reverse hierarchical order (Stevens & Olsen 2004)",
}

SELECTED = "selected"
SPARE = "spare"
_MAX_LEVELS = 26  # 4**26 < 2**63: addresses stay exact in int64


def split_draw(n_total: int, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Status and spare rank of an ordered draw of ``n_total`` points.

    Parameters
    ----------
    n_total : int
        Points drawn, ``n`` selected plus the spares.
    n : int
        Points to take as selected (the first ``n`` of the order).

    Returns
    -------
    status : numpy.ndarray
        ``"selected"`` for the first ``n`` entries, ``"spare"`` after.
    spare_rank : numpy.ndarray
        0 for selected points, 1..K for spares in the order they are used.

    Examples
    --------
    >>> split_draw(5, 3)[1].tolist()
    [0, 0, 0, 1, 2]
    """
    if n < 0 or n_total < 0:
        raise ValueError(f"point counts must be non-negative, got n={n}, n_total={n_total}")
    n = min(int(n), int(n_total))
    rank = np.zeros(int(n_total), dtype=np.int64)
    rank[n:] = np.arange(1, int(n_total) - n + 1)
    status = np.where(rank == 0, SELECTED, SPARE).astype(object)
    return status, rank


def srs_indices(n_population: int, n: int, k: int, *, rng: np.random.Generator) -> np.ndarray:
    """Draw ``n + k`` of ``n_population`` units without replacement, in random order.

    Every prefix of the result is a simple random sample without replacement of
    its length, so the last ``k`` entries serve as spares in rank order.
    """
    total = int(n) + int(k)
    if total > n_population:
        raise ValueError(f"cannot draw {total} of {n_population} units without replacement")
    return rng.choice(int(n_population), size=total, replace=False, shuffle=True)


def quadtree_addresses(
    xy: np.ndarray, *, rng: np.random.Generator, levels: int | None = None, shift: bool = True
) -> tuple[np.ndarray, int]:
    """Randomised quadtree addresses of points, as in GRTS (Stevens & Olsen 2004).

    The points' bounding square (doubled and randomly translated when ``shift``)
    is split into quadrants ``levels`` times; at every node the four quadrant
    labels are randomly permuted (hierarchical randomisation), and the labels
    from the top down form a base-4 address.

    Returns
    -------
    addresses : numpy.ndarray
        int64 address of each point.
    levels : int
        Depth used.
    """
    xy = np.asarray(xy, dtype=float).reshape(-1, 2)
    m = len(xy)
    if levels is None:
        levels = min(_MAX_LEVELS, max(1, math.ceil(math.log(max(m, 2), 4))) + 3)
    if m == 0:
        return np.zeros(0, dtype=np.int64), levels
    lo = xy.min(axis=0)
    side = float(max((xy.max(axis=0) - lo).max(), 1e-9)) * (1 + 1e-9)
    if shift:
        # A random translation of a square twice as large keeps every point inside.
        lo = lo - rng.random(2) * side
        side *= 2.0
    cells = 1 << levels
    ij = np.clip(np.floor((xy - lo) / side * cells).astype(np.int64), 0, cells - 1)
    address = np.zeros(m, dtype=np.int64)
    for level in range(levels):
        bit = levels - 1 - level
        quadrant = ((ij[:, 0] >> bit) & 1) * 2 + ((ij[:, 1] >> bit) & 1)
        nodes, node_of = np.unique(address, return_inverse=True)
        perms = rng.permuted(np.tile(np.arange(4, dtype=np.int64), (len(nodes), 1)), axis=1)
        address = address * 4 + perms[node_of.ravel(), quadrant]
    return address, levels


def _digit_reversed(positions: np.ndarray, digits: int) -> np.ndarray:
    out = np.zeros_like(positions)
    rest = positions.copy()
    for _ in range(digits):
        out = out * 4 + rest % 4
        rest //= 4
    return out


def reverse_hierarchical_order(addresses: np.ndarray, *, rng: np.random.Generator) -> np.ndarray:
    """Order points by digit-reversed position along their quadtree addresses.

    Points are first sorted by address (ties broken at random); position ``p`` in
    that order, written with ``D = ceil(log4 m)`` base-4 digits, is reversed and
    the points are sorted by the reversed value (Stevens & Olsen 2004).

    Returns
    -------
    numpy.ndarray
        Permutation of ``range(m)``: the indices of the points in use order.
    """
    addresses = np.asarray(addresses, dtype=np.int64)
    m = len(addresses)
    if m <= 1:
        return np.arange(m)
    hierarchical = np.lexsort((rng.random(m), addresses))
    digits = max(1, math.ceil(math.log(m, 4) - 1e-12))
    reversed_pos = _digit_reversed(np.arange(m, dtype=np.int64), digits)
    return hierarchical[np.argsort(reversed_pos, kind="stable")]


def balanced_order(xy: np.ndarray, *, rng: np.random.Generator) -> np.ndarray:
    """Reverse hierarchical order of a spatially balanced draw (indices into ``xy``)."""
    addresses, _ = quadtree_addresses(xy, rng=rng)
    return reverse_hierarchical_order(addresses, rng=rng)


def order_draw(design: str, xy: np.ndarray, n: int, *, rng: np.random.Generator):
    """Put a draw of ``n + K`` points in use order and label it.

    Parameters
    ----------
    design : str
        One of :data:`SPARE_DESIGNS`.
    xy : numpy.ndarray
        ``(n + K, 2)`` points as the design returned them.
    n : int
        Points to select; the rest are spares.
    rng : numpy.random.Generator
        Used by the balanced ordering only (after the draw, so the draw itself is
        the design's own).

    Returns
    -------
    order : numpy.ndarray
        Indices into ``xy`` in use order.
    status, spare_rank : numpy.ndarray
        As :func:`split_draw`, aligned with ``order``.
    """
    if design not in SPARE_DESIGNS:
        raise ValueError(f"spares are available for {', '.join(SPARE_DESIGNS)}; not for {design!r}")
    xy = np.asarray(xy, dtype=float).reshape(-1, 2)
    order = balanced_order(xy, rng=rng) if design == "balanced" else np.arange(len(xy))
    status, rank = split_draw(len(xy), n)
    return order, status, rank
