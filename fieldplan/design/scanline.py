"""Even-odd scanline of blocks' rings against their row lines, in numpy over all blocks at once.

The row model (:mod:`fieldplan.design.clusters`) needs, for every row line of a
block, the pieces inside the block. Here every function works on many *units*
at once (a unit is one part of one block, with its own row lines): edges of
every ring of every unit are crossed with the row lines they span in a few
array calls, so a plan of a thousand blocks costs about as many numpy calls as
a plan of one. Work is O(vertices + rows + crossings), with no plant-sized
array.

Rows of unit ``j``: line ``k`` lies at ``v = first[j] + k * spacing[j]`` for
``k = 0 .. count[j]-1`` in that unit's row frame (``u`` along the rows, ``v``
across). Arithmetic is written element by element in the same order for every
unit (no dot products), so a unit's pieces do not depend on the other units in
the call.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "LEN_TOL",
    "first_distinct",
    "frame_coordinates",
    "group_starts",
    "locate_ranks",
    "plant_layout",
    "row_frames",
    "row_pieces",
    "row_span",
    "segment_ends",
    "straight_points",
]

# Pieces shorter than this (metres) are dropped: touching points, not rows.
LEN_TOL = 1e-9


def row_frames(bearing_deg) -> tuple[np.ndarray, np.ndarray]:
    """``(k, 2)`` unit vectors along (``u``) and across (``v``, to the right of ``u``) the rows.

    Parameters
    ----------
    bearing_deg : array_like
        Direction rows run, degrees clockwise from north, one per unit.
    """
    theta = np.radians(np.asarray(bearing_deg, dtype=float))
    s, c = np.sin(theta), np.cos(theta)
    return np.stack([s, c], axis=-1), np.stack([c, -s], axis=-1)


def frame_coordinates(xy: np.ndarray, u: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Coordinates along and across the rows: ``x * u[0] + y * u[1]`` and the same with ``v``.

    ``u`` and ``v`` are ``(2,)`` or one row per point of ``xy``.
    """
    x, y = xy[:, 0], xy[:, 1]
    return x * u[..., 0] + y * u[..., 1], x * v[..., 0] + y * v[..., 1]


def group_starts(key: np.ndarray) -> np.ndarray:
    """Index of the first element of each run of equal values in ``key``."""
    if key.size == 0:
        return np.zeros(0, dtype=np.int64)
    return np.flatnonzero(np.r_[True, key[1:] != key[:-1]])


def row_span(
    pv: np.ndarray, unit: np.ndarray, units: int, spacing: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """First row offset (half a spacing in from the lowest ``v``) and the number of rows, per unit.

    ``unit`` (sorted) is the unit of each vertex; a unit with no vertex has no rows.
    """
    lo = np.full(units, np.inf)
    hi = np.full(units, -np.inf)
    if pv.size:
        at = group_starts(unit)
        lo[unit[at]] = np.minimum.reduceat(pv, at)
        hi[unit[at]] = np.maximum.reduceat(pv, at)
    first = lo + spacing / 2.0
    with np.errstate(invalid="ignore"):
        count = np.ceil((hi - first) / spacing)
    count = np.where(np.isfinite(count), np.maximum(count, 0.0), 0.0).astype(np.int64)
    return np.where(np.isfinite(first), first, 0.0), count


def _below(value: np.ndarray, first: np.ndarray, spacing: np.ndarray, count: np.ndarray) -> np.ndarray:
    """Rows with an offset strictly below ``value``, element by element.

    The estimate from a division can be one off where ``value`` lies on a row
    line; it is settled on the offsets themselves, computed as everywhere else,
    so every edge uses the same comparison.
    """
    k = np.minimum(np.maximum(np.ceil((value - first) / spacing), 0.0), count.astype(float)).astype(np.int64)
    while True:
        down = (k > 0) & (first + (k - 1) * spacing >= value)
        if not down.any():
            break
        k -= down
    while True:
        up = (k < count) & (first + k * spacing < value)
        if not up.any():
            break
        k += up
    return k


def row_pieces(
    pu: np.ndarray,
    pv: np.ndarray,
    ring: np.ndarray,
    first,
    spacing,
    count,
    unit: np.ndarray | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Pieces of the row lines inside closed rings (even-odd rule), for many units at once.

    An edge crosses the line ``v = c`` when ``min(v0, v1) <= c < max(v0, v1)``
    (half-open, so a vertex on a line is counted once, or twice at a local
    minimum where the two crossings pair into a zero-length piece). Crossings
    of a line sorted along ``u`` pair up (1st-2nd, 3rd-4th, ...) into the pieces
    inside; pieces that meet end to end are joined, as
    :func:`shapely.line_merge` does.

    Parameters
    ----------
    pu, pv : numpy.ndarray
        Ring vertices in their unit's row frame, rings one after another, each closed.
    ring : numpy.ndarray
        Ring index of each vertex (a ring lies in one unit).
    first, spacing : float or numpy.ndarray
        Offset of row 0 and distance between rows, per unit.
    count : int or numpy.ndarray
        Number of rows per unit.
    unit : numpy.ndarray, optional
        Unit of each vertex, sorted (default: all in unit 0).

    Returns
    -------
    unit, row, start, end : numpy.ndarray
        Unit, 0-based row index and ``u`` range of each piece, ordered by unit,
        row, then along the row; pieces shorter than :data:`LEN_TOL` dropped.
    """
    first = np.atleast_1d(np.asarray(first, dtype=float))
    spacing = np.atleast_1d(np.asarray(spacing, dtype=float))
    count = np.atleast_1d(np.asarray(count, dtype=np.int64))
    if unit is None:
        unit = np.zeros(pu.size, dtype=np.int64)
    # Edges join consecutive vertices of the same ring.
    e = np.flatnonzero(ring[1:] == ring[:-1]) if ring.size > 1 else np.zeros(0, dtype=np.int64)
    eu = unit[e]
    f, s, c = first[eu], spacing[eu], count[eu]
    u0, v0, u1, v1 = pu[e], pv[e], pu[e + 1], pv[e + 1]
    a = _below(np.minimum(v0, v1), f, s, c)
    b = _below(np.maximum(v0, v1), f, s, c)
    cross = b - a
    spans = cross > 0
    e_idx = np.flatnonzero(spans)
    n_at = cross[e_idx]
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = (u1[e_idx] - u0[e_idx]) / (v1[e_idx] - v0[e_idx])
    # Crossing j of a spanning edge lies on its row a + j; per-edge values are repeated (in
    # order, cheaper than gathering them) and combined in the same order of operations.
    k = np.arange(int(n_at.sum())) - np.repeat(np.cumsum(n_at) - n_at - a[e_idx], n_at)

    def per_crossing(values: np.ndarray) -> np.ndarray:
        return np.repeat(values[e_idx], n_at)

    at = per_crossing(u0) + ((per_crossing(f) + k * per_crossing(s)) - per_crossing(v0)) * np.repeat(
        slope, n_at
    )
    # One number per row line of every unit: pieces sort by unit, then row, then along the row.
    row_base = np.cumsum(count) - count
    line = k + per_crossing(row_base[eu])
    order = np.argsort(line, kind="stable")
    line, at = line[order], at[order]
    starts = group_starts(line)
    size = np.diff(np.append(starts, line.size))
    # Along each line: two crossings are put in order by a min/max; lines with more, those
    # with the same count at once, by a sort along the rows of a (lines, crossings) array (a
    # two-key sort of all crossings costs three times more).
    two = starts[size == 2]
    at[two], at[two + 1] = np.minimum(at[two], at[two + 1]), np.maximum(at[two], at[two + 1])
    for m in np.unique(size[size > 2]).tolist():
        idx = starts[size == m][:, None] + np.arange(m)
        at[idx] = np.sort(at[idx], axis=1)
    # Pair crossings 1st-2nd, 3rd-4th, ... within each row line. Closed rings cross a line an
    # even number of times, so pairs start at every other crossing; an odd count (a ring left
    # open) drops its last crossing.
    if (size % 2 == 0).all():
        line, start, end = line[0::2], at[0::2], at[1::2]
    else:
        pos = np.arange(line.size) - np.repeat(starts, size)
        lead = np.flatnonzero((pos % 2 == 0) & (pos + 1 < np.repeat(size, size)))
        line, start, end = line[lead], at[lead], at[lead + 1]
    # Join pieces that meet end to end on the same row line.
    joined = np.r_[False, (line[1:] == line[:-1]) & (end[:-1] == start[1:])] if line.size else line > 0
    if joined.any():
        heads = np.flatnonzero(~joined)
        last = np.append(heads[1:] - 1, line.size - 1) if heads.size else heads
        line, start, end = line[heads], start[heads], end[last]
    keep = end - start > LEN_TOL
    if not keep.all():
        line, start, end = line[keep], start[keep], end[keep]
    piece_unit = np.searchsorted(row_base + count, line, side="right")
    return piece_unit, line - row_base[piece_unit], start, end


def plant_layout(
    unit: np.ndarray,
    row: np.ndarray,
    start: np.ndarray,
    end: np.ndarray,
    first: np.ndarray,
    spacing: np.ndarray,
    plant_spacing: np.ndarray,
):
    """Plants on each piece, their numbering along the row, and the offset of the piece's row line.

    A piece of length ``L`` holds ``c = floor(L / plant_spacing)`` plants centred
    on it; plant numbers continue along a row over its pieces (pieces sorted by
    unit and row, a row's pieces consecutive). ``first``, ``spacing`` and
    ``plant_spacing`` are per unit.

    Returns
    -------
    length, plants, first_plant, offset, across : numpy.ndarray
        ``across`` is the ``v`` of each piece's row line: with ``start`` and ``end``
        it gives the piece's end points (:func:`segment_ends`).
    """
    ps = plant_spacing[unit]
    length = end - start
    plants = np.floor(length / ps + 1e-9).astype(np.int64)
    before = np.cumsum(plants) - plants
    starts = group_starts(unit * (int(row.max(initial=0)) + 1) + row)
    row_base = np.repeat(before[starts], np.diff(np.append(starts, row.size)))
    first_plant = before - row_base + 1
    offset = (length - plants * ps) / 2.0 + ps / 2.0
    return length, plants, first_plant, offset, first[unit] + row * spacing[unit]


def segment_ends(across: np.ndarray, start: np.ndarray, end: np.ndarray, u: np.ndarray, v: np.ndarray):
    """``(k, 2, 2)`` start and end points of pieces at ``v = across`` from ``u = start`` to ``end``.

    ``u`` and ``v`` are ``(2,)`` or one row per piece.
    """
    u = np.broadcast_to(u, (across.size, 2))
    v = np.broadcast_to(v, (across.size, 2))
    ends = np.empty((across.size, 2, 2))
    for j in range(2):  # x, then y
        ends[:, 0, j] = across * v[:, j] + start * u[:, j]
        ends[:, 1, j] = across * v[:, j] + end * u[:, j]
    return ends


def first_distinct(values: np.ndarray, n: int) -> np.ndarray:
    """The first ``n`` distinct values in order of first occurrence (fewer if there are not ``n``)."""
    _, first = np.unique(values, return_index=True)  # stable: the first occurrence of each value
    return values[np.sort(first)][:n]


def locate_ranks(eligible: np.ndarray, ranks: np.ndarray, skip) -> tuple[np.ndarray, np.ndarray]:
    """Segment and 0-based plant index along it of each drawn rank.

    Eligible plants are ranked segment by segment; rank ``r`` falls in the first
    segment whose cumulative eligible count exceeds it (a binary search) and is
    its ``skip + (r - eligible before)``-th plant.
    """
    eligible = np.asarray(eligible, dtype=np.int64)
    cum = np.cumsum(eligible)
    seg = np.searchsorted(cum, ranks, side="right")
    return seg, ranks - (cum[seg] - eligible[seg]) + skip


def straight_points(dist: np.ndarray, ends: np.ndarray, length: np.ndarray) -> np.ndarray:
    """``(n, 2)`` points ``dist`` metres along straight segments given by their ``(n, 2, 2)`` ends."""
    t = dist / length
    return ends[:, 0, :] + (ends[:, 1, :] - ends[:, 0, :]) * t[:, None]
