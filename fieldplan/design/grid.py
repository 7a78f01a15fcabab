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
    "grid_points",
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


def lattice_basis(spacing: float, layout: str = "square", bearing_deg: float = 0.0) -> np.ndarray:
    """The two lattice vectors as rows of a 2×2 array, in metres.

    The first vector points along ``bearing_deg`` (clockwise from grid north), so a
    bearing equal to a block's row bearing lays grid lines along its rows.
    """
    _check_layout(layout)
    if not spacing > 0:
        raise OptionError(f"--spacing must be positive, got {spacing}")
    theta = math.radians(bearing_deg)
    e1 = np.array([math.sin(theta), math.cos(theta)])
    e2 = np.array([-e1[1], e1[0]])
    second = e2 if layout == "square" else 0.5 * e1 + (math.sqrt(3.0) / 2.0) * e2
    # Plain array construction: this runs once per block, where vstack's overhead shows.
    return spacing * np.array([e1, second])


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
    if polygon is None or shapely.is_empty(polygon):
        return np.empty((0, 2))
    if not all(0.0 <= o < 1.0 for o in offset):
        raise OptionError(f"grid offset must lie in [0, 1), got {offset}")
    basis = lattice_basis(spacing, layout, bearing_deg)
    start = np.asarray(origin, dtype=float) + np.asarray(offset) @ basis
    minx, miny, maxx, maxy = shapely.bounds(polygon)
    corners = np.array([[minx, miny], [minx, maxy], [maxx, miny], [maxx, maxy]]) - start
    # Lattice coordinates of the bounding box corners tell which indices can fall inside.
    (b00, b01), (b10, b11) = basis.tolist()
    det = b00 * b11 - b01 * b10
    lattice = corners @ (np.array([[b11, -b01], [-b10, b00]]) / det)
    lo = np.floor(lattice.min(axis=0)).astype(np.int64)
    hi = np.ceil(lattice.max(axis=0)).astype(np.int64)
    n_candidates = int(hi[0] - lo[0] + 1) * int(hi[1] - lo[1] + 1)
    if max_points is not None and n_candidates > 4 * max_points + 1_000_000:
        raise DesignError(
            f"grid would test {n_candidates:,} lattice points in one block; "
            "use a wider spacing or a lower density"
        )
    # Same order as meshgrid(i, j).ravel(): the first index runs fastest.
    ni, nj = int(hi[0] - lo[0] + 1), int(hi[1] - lo[1] + 1)
    index = np.empty((ni * nj, 2))
    index[:, 0] = np.tile(np.arange(lo[0], hi[0] + 1, dtype=float), nj)
    index[:, 1] = np.repeat(np.arange(lo[1], hi[1] + 1, dtype=float), ni)
    xy = start + index @ basis
    shapely.prepare(polygon)
    inside = shapely.contains_xy(polygon, xy[:, 0], xy[:, 1])
    return xy[inside]
