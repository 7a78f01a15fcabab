"""Simple random points in a polygon.

Points are drawn uniformly in the polygon's bounding box in vectorised batches
and kept when they fall inside the polygon (holes excluded). Accepted points are
returned in the order drawn, so any prefix of the result is itself a simple
random sample: later stages use the tail as spare locations.

A polygon that fills little of its bounding box (a long diagonal strip, a thin
headland left by an edge buffer) would waste most draws, so it is triangulated
instead (constrained Delaunay, which follows the edges and holes): a triangle is
chosen with probability proportional to its area and a point drawn uniformly in
it, which is again uniform over the polygon.
"""

from __future__ import annotations

import numpy as np
import shapely
from shapely.geometry.base import BaseGeometry

from fieldplan.errors import DesignError

__all__ = ["random_points"]

# Below this share of its bounding box a polygon is sampled through its
# triangles: rejection would need more than ~20 draws per point.
_MIN_FILL = 0.05
_MAX_ROUNDS = 200


def random_points(polygon: BaseGeometry, n: int, *, rng: np.random.Generator) -> np.ndarray:
    """Draw ``n`` points uniformly at random inside a (multi)polygon.

    Parameters
    ----------
    polygon : shapely Polygon or MultiPolygon
        Area to sample, in a metric CRS; holes are excluded.
    n : int
        Number of points.
    rng : numpy.random.Generator
        Source of randomness.

    Returns
    -------
    numpy.ndarray
        ``(n, 2)`` float array of x, y in draw order.

    Raises
    ------
    DesignError
        The polygon is empty or has no area.
    """
    if n < 0 or int(n) != n:
        raise DesignError(f"number of random points must be a whole number >= 0, got {n}")
    n = int(n)
    if polygon is None or polygon.is_empty or polygon.area <= 0:
        raise DesignError("cannot place random points in an empty polygon or one without area")
    if n == 0:
        return np.empty((0, 2), dtype=float)
    xmin, ymin, xmax, ymax = polygon.bounds
    fill = polygon.area / ((xmax - xmin) * (ymax - ymin))
    shapely.prepare(polygon)
    if fill < _MIN_FILL:
        draw, fill = _triangle_sampler(polygon, rng), 1.0
    else:

        def draw(batch: int) -> np.ndarray:
            xy = rng.random((batch, 2))
            xy[:, 0] = xmin + xy[:, 0] * (xmax - xmin)
            xy[:, 1] = ymin + xy[:, 1] * (ymax - ymin)
            return xy

    found: list[np.ndarray] = []
    have = 0
    for _ in range(_MAX_ROUNDS):
        need = n - have
        batch = int(np.ceil(need / fill * 1.25)) + 16
        xy = draw(batch)
        # Also drops the rare triangle point that rounding puts just outside.
        inside = shapely.contains_xy(polygon, xy[:, 0], xy[:, 1])
        kept = xy[inside][:need]
        found.append(kept)
        have += kept.shape[0]
        if have >= n:
            return np.concatenate(found, axis=0)
    raise DesignError("random point placement did not converge; the polygon may be degenerate")


def _triangle_sampler(polygon: BaseGeometry, rng: np.random.Generator):
    """Return ``draw(k)``: ``k`` uniform points in the polygon via its triangles."""
    tris = shapely.get_parts(shapely.constrained_delaunay_triangles(polygon))
    corners = shapely.get_coordinates(tris).reshape(len(tris), 4, 2)[:, :3]
    a, b, c = corners[:, 0], corners[:, 1], corners[:, 2]
    area = 0.5 * np.abs((b[:, 0] - a[:, 0]) * (c[:, 1] - a[:, 1]) - (c[:, 0] - a[:, 0]) * (b[:, 1] - a[:, 1]))
    cum = np.cumsum(area)

    def draw(k: int) -> np.ndarray:
        pick = np.minimum(np.searchsorted(cum, rng.random(k) * cum[-1], side="right"), len(cum) - 1)
        u, v = rng.random(k), rng.random(k)
        # Reflect the upper half of the unit square onto the triangle's half.
        flip = u + v > 1.0
        u[flip], v[flip] = 1.0 - u[flip], 1.0 - v[flip]
        ab, ac = b[pick] - a[pick], c[pick] - a[pick]
        return a[pick] + u[:, None] * ab + v[:, None] * ac

    return draw
