"""Even-odd scanline of a block's rings against its row lines, compiled with numba.

The row model (:mod:`fieldplan.design.clusters`) needs, for every row line of a
block, the pieces inside the block. Done with numpy array calls, each block
costs some sixty small calls, so the fixed cost per call outweighs the work for
all but huge blocks; this kernel does the same arithmetic in one compiled pass,
O(vertices + rows + crossings), with no plant-sized array.

Rows: line ``k`` lies at ``v = first + k * spacing`` for ``k = 0 .. count-1``
in the block's row frame (``u`` along the rows, ``v`` across).
"""

from __future__ import annotations

import numpy as np

from fieldplan.design.jit import kernel

__all__ = [
    "clip_pieces",
    "first_distinct",
    "frame_coordinates",
    "locate_ranks",
    "plant_layout",
    "row_model",
    "row_pieces",
    "row_span",
    "segment_ends",
    "straight_points",
]

# Pieces shorter than this (metres) are dropped: touching points, not rows.
LEN_TOL = 1e-9


@kernel
def _below(value: float, first: float, spacing: float, count: int) -> int:
    """Rows with an offset strictly below ``value``.

    The estimate from a division can be one off where ``value`` lies on a row
    line; it is settled on the offsets themselves, computed as everywhere else,
    so every edge uses the same comparison.
    """
    k = np.ceil((value - first) / spacing)
    k = int(min(max(k, 0.0), float(count)))
    while k > 0 and first + (k - 1) * spacing >= value:
        k -= 1
    while k < count and first + k * spacing < value:
        k += 1
    return k


@kernel
def row_pieces(
    pu: np.ndarray, pv: np.ndarray, ring: np.ndarray, first: float, spacing: float, count: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Pieces of the row lines inside closed rings (even-odd rule).

    An edge crosses the line ``v = c`` when ``min(v0, v1) <= c < max(v0, v1)``
    (half-open, so a vertex on a line is counted once, or twice at a local
    minimum where the two crossings pair into a zero-length piece). Crossings
    of a line sorted along ``u`` pair up (1st-2nd, 3rd-4th, ...) into the pieces
    inside; pieces that meet end to end are joined, as
    :func:`shapely.line_merge` does.

    Parameters
    ----------
    pu, pv : numpy.ndarray
        Ring vertices in the row frame, rings one after another, each closed.
    ring : numpy.ndarray
        Ring index of each vertex.
    first, spacing : float
        Offset of row 0 and distance between rows.
    count : int
        Number of rows.

    Returns
    -------
    row, start, end : numpy.ndarray
        0-based row index and ``u`` range of each piece, ordered by row then
        along the row; pieces shorter than :data:`LEN_TOL` dropped.
    """
    n = pu.size
    per_row = np.zeros(count + 1, dtype=np.int64)
    lo = np.empty(max(n - 1, 0), dtype=np.int64)
    hi = np.empty(max(n - 1, 0), dtype=np.int64)
    for e in range(n - 1):
        if ring[e] != ring[e + 1]:
            lo[e] = 0
            hi[e] = 0
            continue
        v0, v1 = pv[e], pv[e + 1]
        a = _below(min(v0, v1), first, spacing, count)
        b = _below(max(v0, v1), first, spacing, count)
        lo[e], hi[e] = a, b
        for k in range(a, b):
            per_row[k + 1] += 1
    for k in range(count):
        per_row[k + 1] += per_row[k]
    at = np.empty(per_row[count], dtype=np.float64)
    fill = per_row[:count].copy()
    for e in range(n - 1):
        if hi[e] <= lo[e]:
            continue
        u0, v0 = pu[e], pv[e]
        slope = (pu[e + 1] - u0) / (pv[e + 1] - v0)
        for k in range(lo[e], hi[e]):
            at[fill[k]] = u0 + ((first + k * spacing) - v0) * slope
            fill[k] += 1
    pieces = at.size // 2
    row = np.empty(pieces, dtype=np.int64)
    start = np.empty(pieces, dtype=np.float64)
    end = np.empty(pieces, dtype=np.float64)
    m = 0
    for k in range(count):
        a, b = per_row[k], per_row[k + 1]
        # Insertion sort: a row crosses a block's boundary a few times only.
        for i in range(a + 1, b):
            x = at[i]
            j = i - 1
            while j >= a and at[j] > x:
                at[j + 1] = at[j]
                j -= 1
            at[j + 1] = x
        for i in range(a, b - 1, 2):
            s, t = at[i], at[i + 1]
            if m > 0 and row[m - 1] == k and end[m - 1] == s:
                end[m - 1] = t
                continue
            row[m], start[m], end[m] = k, s, t
            m += 1
    keep = 0
    for i in range(m):
        if end[i] - start[i] > LEN_TOL:
            row[keep], start[keep], end[keep] = row[i], start[i], end[i]
            keep += 1
    return row[:keep], start[:keep], end[:keep]


@kernel
def frame_coordinates(xy: np.ndarray, u: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(xy @ u, xy @ v)``: coordinates along and across the rows."""
    n = xy.shape[0]
    pu = np.empty(n)
    pv = np.empty(n)
    for i in range(n):
        x, y = xy[i, 0], xy[i, 1]
        pu[i] = x * u[0] + y * u[1]
        pv[i] = x * v[0] + y * v[1]
    return pu, pv


@kernel
def row_span(pv: np.ndarray, spacing: float) -> tuple[float, int]:
    """First row offset (half a spacing in from the lowest ``v``) and the number of rows."""
    lo, hi = pv.min(), pv.max()
    first = lo + spacing / 2.0
    return first, max(int(np.ceil((hi - first) / spacing)), 0)


@kernel
def plant_layout(
    row: np.ndarray,
    start: np.ndarray,
    end: np.ndarray,
    first: float,
    spacing: float,
    plant_spacing: float,
    u: np.ndarray,
    v: np.ndarray,
):
    """Plants on each piece, their numbering along the row, and the piece's end points.

    A piece of length ``L`` holds ``c = floor(L / plant_spacing)`` plants centred
    on it; plant numbers continue along a row over its pieces (``row`` is
    sorted, a row's pieces consecutive).

    Returns
    -------
    length, plants, first_plant, offset, ends : numpy.ndarray
        ``ends`` is ``(k, 2, 2)``: start and end point of each piece.
    """
    k = row.size
    length = np.empty(k)
    plants = np.empty(k, dtype=np.int64)
    first_plant = np.empty(k, dtype=np.int64)
    offset = np.empty(k)
    on_row = 0
    for i in range(k):
        if i > 0 and row[i] != row[i - 1]:
            on_row = 0
        length[i] = end[i] - start[i]
        c = int(np.floor(length[i] / plant_spacing + 1e-9))
        plants[i] = c
        first_plant[i] = on_row + 1
        on_row += c
        offset[i] = (length[i] - c * plant_spacing) / 2.0 + plant_spacing / 2.0
    ends = segment_ends(first + row * spacing, start, end, u, v)
    return length, plants, first_plant, offset, ends


@kernel
def segment_ends(across: np.ndarray, start: np.ndarray, end: np.ndarray, u: np.ndarray, v: np.ndarray):
    """``(k, 2, 2)`` start and end points of pieces at ``v = across`` from ``u = start`` to ``end``."""
    k = across.size
    ends = np.empty((k, 2, 2))
    for i in range(k):
        for j in range(2):
            ends[i, 0, j] = across[i] * v[j] + start[i] * u[j]
            ends[i, 1, j] = across[i] * v[j] + end[i] * u[j]
    return ends


@kernel
def row_model(
    xy: np.ndarray, ring: np.ndarray, u: np.ndarray, v: np.ndarray, spacing: float, plant_spacing: float
):
    """The whole row model of a block in one call.

    Returns
    -------
    row, start, length, plants, first_plant, offset, ends : numpy.ndarray
        Per piece, as :func:`row_pieces` and :func:`plant_layout` give them.
    first : float
        Offset of row 0.
    count : int
        Number of row lines.
    """
    pu, pv = frame_coordinates(xy, u, v)
    first, count = row_span(pv, spacing)
    row, start, end = row_pieces(pu, pv, ring, first, spacing, count)
    length, plants, first_plant, offset, ends = plant_layout(
        row, start, end, first, spacing, plant_spacing, u, v
    )
    return row, start, length, plants, first_plant, offset, ends, first, count


@kernel
def clip_pieces(
    xy: np.ndarray, ring: np.ndarray, u: np.ndarray, v: np.ndarray, first: float, spacing: float, count: int
):
    """:func:`row_pieces` of another polygon (a clip) on a block's row lines."""
    pu, pv = frame_coordinates(xy, u, v)
    return row_pieces(pu, pv, ring, first, spacing, count)


@kernel
def first_distinct(values: np.ndarray, n: int) -> np.ndarray:
    """The first ``n`` distinct values in order of first occurrence (fewer if there are not ``n``)."""
    order = np.argsort(values, kind="mergesort")
    first = np.zeros(values.size, dtype=np.bool_)
    for i in range(values.size):
        j = order[i]
        if i == 0 or values[j] != values[order[i - 1]]:
            first[j] = True
    out = np.empty(min(n, values.size), dtype=values.dtype)
    m = 0
    for j in range(values.size):
        if first[j]:
            if m == out.size:
                break
            out[m] = values[j]
            m += 1
    return out[:m]


@kernel
def locate_ranks(eligible: np.ndarray, ranks: np.ndarray, skip: int) -> tuple[np.ndarray, np.ndarray]:
    """Segment and 0-based plant index along it of each drawn rank.

    Eligible plants are ranked segment by segment; rank ``r`` falls in the first
    segment whose cumulative eligible count exceeds it (a binary search) and is
    its ``skip + (r - eligible before)``-th plant.
    """
    cum = np.cumsum(eligible)
    seg = np.searchsorted(cum, ranks, side="right")
    within = np.empty(ranks.size, dtype=np.int64)
    for j in range(ranks.size):
        s = seg[j]
        within[j] = ranks[j] - (cum[s] - eligible[s]) + skip
    return seg, within


@kernel
def straight_points(seg: np.ndarray, dist: np.ndarray, ends: np.ndarray, length: np.ndarray) -> np.ndarray:
    """``(n, 2)`` points ``dist`` metres along straight segments ``seg`` (given by their ends)."""
    xy = np.empty((seg.size, 2))
    for j in range(seg.size):
        s = seg[j]
        t = dist[j] / length[s]
        for d in range(2):
            xy[j, d] = ends[s, 0, d] + (ends[s, 1, d] - ends[s, 0, d]) * t
    return xy
