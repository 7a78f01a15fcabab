"""Systematic grids with a random start: square and triangular lattices.

A lattice is fixed by an origin, a spacing, a bearing and a layout. A uniform
random offset inside one lattice cell makes every spot of the field equally
likely to be sampled, so the expected number of points in any area A is
``A / cell_area`` (systematic sampling with a random start; Cochran,
*Sampling Techniques*, ch. 8).
"""

from __future__ import annotations

import math

import numpy as np
import shapely

from fieldplan.errors import DesignError, OptionError

__all__ = [
    "LAYOUTS",
    "cell_area",
    "spacing_for_density",
    "lattice_basis",
    "lattice_bases",
    "grid_points",
    "grid_points_many",
    "expected_count",
]

LAYOUTS = ("square", "triangular")


def _check_layout(layout: str) -> str:
    if layout not in LAYOUTS:
        raise OptionError(f"layout must be one of {', '.join(LAYOUTS)}; got {layout!r}")
    return layout


def cell_area(spacing: float, layout: str = "square") -> float:
    """Area in m² that one lattice point stands for.

    Square: ``s²``; triangular (rows ``s·√3/2`` apart): ``s²·√3/2``.
    """
    _check_layout(layout)
    return spacing * spacing * (1.0 if layout == "square" else math.sqrt(3.0) / 2.0)


def spacing_for_density(per_ha: float, layout: str = "square") -> float:
    """Spacing in metres that gives ``per_ha`` points per hectare.

    Examples
    --------
    >>> round(spacing_for_density(1.0), 6)
    100.0
    """
    if not per_ha > 0:
        raise OptionError(f"--per-ha must be a positive density, got {per_ha}")
    return math.sqrt(10_000.0 / per_ha / cell_area(1.0, layout))


def lattice_bases(spacing: float, layout: str = "square", bearing_deg=0.0) -> np.ndarray:
    """The two lattice vectors for each bearing: ``(n, 2, 2)``, rows as in :func:`lattice_basis`."""
    _check_layout(layout)
    if not spacing > 0:
        raise OptionError(f"--spacing must be positive, got {spacing}")
    theta = np.radians(np.asarray(bearing_deg, dtype=float).reshape(-1))
    e1 = np.column_stack([np.sin(theta), np.cos(theta)])
    e2 = np.column_stack([-e1[:, 1], e1[:, 0]])
    second = e2 if layout == "square" else 0.5 * e1 + (math.sqrt(3.0) / 2.0) * e2
    return spacing * np.stack([e1, second], axis=1)


def lattice_basis(spacing: float, layout: str = "square", bearing_deg: float = 0.0) -> np.ndarray:
    """The two lattice vectors as rows of a 2×2 array, in metres.

    The first vector points along ``bearing_deg`` (clockwise from grid north), so a
    bearing equal to a block's row bearing lays grid lines along its rows.
    """
    return lattice_bases(spacing, layout, bearing_deg)[0]


def expected_count(area_m2: float, spacing: float, layout: str = "square") -> float:
    """Expected number of lattice points in an area, over uniform random starts."""
    return area_m2 / cell_area(spacing, layout)


def grid_points(
    polygon,
    spacing: float,
    *,
    layout: str = "square",
    bearing_deg: float = 0.0,
    origin: tuple[float, float] = (0.0, 0.0),
    offset: tuple[float, float] = (0.0, 0.0),
    max_points: int | None = None,
) -> np.ndarray:
    """Lattice points inside a polygon.

    Parameters
    ----------
    polygon : shapely Polygon or MultiPolygon
        Area to sample (already buffered and with exclusions removed), metric CRS.
    spacing : float
        Distance between neighbouring points in metres.
    layout : {"square", "triangular"}
    bearing_deg : float
        Bearing of the first lattice axis, clockwise from grid north.
    origin : (float, float)
        A lattice point before the offset is applied; shared by all blocks for a
        field-wide random start.
    offset : (float, float)
        Random start as fractions of the two lattice vectors, each in ``[0, 1)``.
    max_points : int, optional
        Refuse to build a lattice that would hold more candidate points than this.

    Returns
    -------
    numpy.ndarray
        ``(k, 2)`` coordinates ordered along the second axis, then the first.

    Examples
    --------
    >>> from shapely import box
    >>> grid_points(box(0, 0, 100, 100), 50, offset=(0.5, 0.5)).shape
    (4, 2)
    """
    xy, _ = grid_points_many(
        [polygon],
        spacing,
        layout=layout,
        bearing_deg=bearing_deg,
        origin=origin,
        offset=offset,
        max_points=max_points,
    )
    return xy


#: Lattice points tested in one vectorised pass; bounds memory for large farms.
_CHUNK_CANDIDATES = 1_000_000


def grid_points_many(
    polygons,
    spacing: float,
    *,
    layout: str = "square",
    bearing_deg=0.0,
    origin=(0.0, 0.0),
    offset=(0.0, 0.0),
    max_points: int | None = None,
    max_total: int | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Lattice points inside many polygons, in one vectorised pass per chunk of blocks.

    Gives, block by block, exactly the points of :func:`grid_points`: each
    block's lattice depends only on its own bearing, origin and offset.

    Parameters
    ----------
    polygons : array_like of Polygon or MultiPolygon (or None / empty)
        Areas to sample, metric CRS.
    spacing : float
        Distance between neighbouring points in metres (one for all blocks).
    layout : {"square", "triangular"}
    bearing_deg : float or array_like
        Per block, or one for all.
    origin, offset : (float, float) or array_like of shape (n, 2)
        Per block, or one pair for all (see :func:`grid_points`).
    max_points : int, optional
        Refuse a block whose lattice would hold more candidate points than this.
    max_total : int, optional
        Stop after the chunk of blocks that takes the point count above this
        (the caller reports it); later blocks are then missing from the result.

    Returns
    -------
    xy : numpy.ndarray
        ``(k, 2)`` coordinates, block by block, each block's as :func:`grid_points` orders them.
    block : numpy.ndarray
        Index into ``polygons`` of each point's block.
    """
    polys = np.asarray(polygons, dtype=object).reshape(-1)
    n = polys.size
    offsets = np.broadcast_to(np.asarray(offset, dtype=float), (n, 2))
    valid = ((offsets >= 0.0) & (offsets < 1.0)).all(axis=1)
    if not valid.all():
        bad = offsets[~valid][0]
        raise OptionError(f"grid offset must lie in [0, 1), got {tuple(bad.tolist())}")
    empty = shapely.is_missing(polys)
    empty[~empty] = shapely.is_empty(polys[~empty])
    basis = lattice_bases(spacing, layout, np.broadcast_to(np.asarray(bearing_deg, dtype=float), (n,)))
    b0, b1 = basis[:, 0], basis[:, 1]
    start = (
        np.broadcast_to(np.asarray(origin, dtype=float), (n, 2)) + offsets[:, :1] * b0 + offsets[:, 1:] * b1
    )
    bounds = shapely.bounds(np.where(empty, None, polys))
    bounds[empty] = 0.0
    # Lattice coordinates of the bounding box corners tell which indices can fall inside.
    det = b0[:, 0] * b1[:, 1] - b0[:, 1] * b1[:, 0]
    inv = np.stack([np.column_stack([b1[:, 1], -b0[:, 1]]), np.column_stack([-b1[:, 0], b0[:, 0]])], axis=1)
    inv = inv / det[:, None, None]
    cx = bounds[:, [0, 0, 2, 2]] - start[:, :1]
    cy = bounds[:, [1, 3, 1, 3]] - start[:, 1:]
    li = cx * inv[:, 0, :1] + cy * inv[:, 1, :1]
    lj = cx * inv[:, 0, 1:] + cy * inv[:, 1, 1:]
    lo_i, hi_i = np.floor(li.min(axis=1)).astype(np.int64), np.ceil(li.max(axis=1)).astype(np.int64)
    lo_j, hi_j = np.floor(lj.min(axis=1)).astype(np.int64), np.ceil(lj.max(axis=1)).astype(np.int64)
    ni, nj = hi_i - lo_i + 1, hi_j - lo_j + 1
    cand = np.where(empty, 0, ni * nj)
    if max_points is not None:
        big = np.flatnonzero(cand > 4 * max_points + 1_000_000)
        if big.size:
            raise DesignError(
                f"grid would test {int(cand[big[0]]):,} lattice points in one block; "
                "use a wider spacing or a lower density"
            )
    shapely.prepare(polys[~empty])
    out_xy, out_block = [], []
    first = total = 0
    ends = np.cumsum(cand)
    while first < n:
        # Blocks up to the candidate budget (at least one) go through one contains_xy.
        budget = (ends[first - 1] if first else 0) + _CHUNK_CANDIDATES
        last = max(int(np.searchsorted(ends, budget, side="right")), first + 1)
        sl = slice(first, last)
        counts = cand[sl]
        b = np.repeat(np.arange(first, last), counts)
        m = np.arange(b.size) - np.repeat(np.cumsum(counts) - counts, counts)
        # Same order as meshgrid(i, j).ravel(): the first index runs fastest.
        i = (lo_i[b] + m % ni[b]).astype(float)
        j = (lo_j[b] + m // ni[b]).astype(float)
        x = start[b, 0] + i * b0[b, 0] + j * b1[b, 0]
        y = start[b, 1] + i * b0[b, 1] + j * b1[b, 1]
        inside = shapely.contains_xy(polys[b], x, y)
        out_xy.append(np.column_stack([x[inside], y[inside]]))
        out_block.append(b[inside])
        first = last
        total += int(inside.sum())
        if max_total is not None and total > max_total:
            break
    if not out_xy:
        return np.empty((0, 2)), np.zeros(0, dtype=np.int64)
    return np.concatenate(out_xy), np.concatenate(out_block)
