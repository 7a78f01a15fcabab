"""Simple random points in a polygon.

Points are drawn uniformly in the polygon's bounding box in vectorised batches
and kept when they fall inside the polygon (holes excluded). Accepted points are
returned in the order drawn, so any prefix of the result is itself a simple
random sample: later stages use the tail as spare locations.
"""

from __future__ import annotations

import numpy as np
import shapely
from shapely.geometry.base import BaseGeometry

from fieldplan.errors import DesignError

__all__ = ["random_points"]

# A polygon filling less than this share of its bounding box would need too many
# draws; such shapes are rare in field boundaries (long diagonal strips).
_MIN_FILL = 1e-4
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
    if fill < _MIN_FILL:
        raise DesignError(
            f"the polygon fills only {fill:.2e} of its bounding box; split it into simpler parts"
        )
    shapely.prepare(polygon)
    found: list[np.ndarray] = []
    have = 0
    for _ in range(_MAX_ROUNDS):
        need = n - have
        batch = int(np.ceil(need / fill * 1.25)) + 16
        xy = rng.random((batch, 2))
        xy[:, 0] = xmin + xy[:, 0] * (xmax - xmin)
        xy[:, 1] = ymin + xy[:, 1] * (ymax - ymin)
        inside = shapely.contains_xy(polygon, xy[:, 0], xy[:, 1])
        kept = xy[inside][:need]
        found.append(kept)
        have += kept.shape[0]
        if have >= n:
            return np.concatenate(found, axis=0)
    raise DesignError("random point placement did not converge; the polygon may be degenerate")
