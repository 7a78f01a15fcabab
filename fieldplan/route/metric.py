"""Walking cost between points, aware of vineyard and orchard rows.

Walking along a row is easy; crossing rows means ducking under trellis wires or
walking round row ends, so it is slower. Within one block whose rows run on the
bearing ``row_bearing_deg`` (clockwise from north), the cost of a step with an
along-row component ``a`` and an across-row component ``c`` (metres) is::

    cost = sqrt(a**2 + (k * c)**2)

with ``k`` the across-row factor (default 1.5 for trellised vineyards; common
practice, no source). ``k = 1`` gives plain Euclidean distance. Between points
of different blocks, or in blocks with unknown row bearing, the cost is the
Euclidean distance: such walks are assumed to follow headlands and tracks.

Within a block the model is a linear map of the plane, so it is a true metric
there; costs are in "effective metres" and divide by the walking speed to give
time.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.spatial import cKDTree

__all__ = ["DEFAULT_ACROSS_FACTOR", "Metric", "row_frame", "row_aware_cost"]

#: Across-row slowdown for trellised vineyards (common practice, no source).
DEFAULT_ACROSS_FACTOR = 1.5


def row_frame(xy: np.ndarray, bearing_deg: np.ndarray, *, across_factor: float) -> np.ndarray:
    """Map points into a frame where row-aware cost is Euclidean distance.

    Parameters
    ----------
    xy : (n, 2) array
        Coordinates in metres (x east, y north).
    bearing_deg : (n,) array
        Row bearing of each point's block, clockwise from north; NaN keeps the
        point's plain coordinates.
    across_factor : float
        The factor ``k`` applied to the across-row component.

    Returns
    -------
    (n, 2) array
        ``(along, k * across)`` for points with a bearing, ``xy`` otherwise.
    """
    xy = np.asarray(xy, dtype=float)
    theta = np.radians(np.asarray(bearing_deg, dtype=float))
    sin, cos = np.sin(theta), np.cos(theta)
    along = xy[:, 0] * sin + xy[:, 1] * cos
    across = xy[:, 0] * cos - xy[:, 1] * sin
    framed = np.column_stack([along, across_factor * across])
    return np.where(np.isfinite(theta)[:, None], framed, xy)


def row_aware_cost(
    xy_a: np.ndarray,
    xy_b: np.ndarray,
    *,
    bearing_deg: float | np.ndarray = np.nan,
    across_factor: float = DEFAULT_ACROSS_FACTOR,
) -> np.ndarray:
    """Row-aware walking cost between pairs of points of the same block.

    Parameters
    ----------
    xy_a, xy_b : (n, 2) arrays
        Pairs of points, metres.
    bearing_deg : float or (n,) array
        Row bearing clockwise from north; NaN gives Euclidean distance.
    across_factor : float
        Across-row factor ``k``.

    Returns
    -------
    (n,) array of costs in effective metres.
    """
    d = np.atleast_2d(np.asarray(xy_b, float)) - np.atleast_2d(np.asarray(xy_a, float))
    bearing = np.broadcast_to(np.asarray(bearing_deg, dtype=float), d.shape[:1])
    framed = row_frame(d, bearing, across_factor=across_factor)
    return np.hypot(framed[:, 0], framed[:, 1])


class Metric:
    """Symmetric walking cost between ``n`` points.

    Parameters
    ----------
    xy : (n, 2) array
        Coordinates in metres in a local metric CRS.
    group : (n,) int array, optional
        Block code of each point; row-aware costs apply only between points of
        the same code. Default: every point its own code (plain Euclidean).
    bearing_deg : (n,) array, optional
        Row bearing of each point's block (NaN if unknown).
    across_factor : float
        Across-row factor ``k`` (>= 1).
    """

    def __init__(
        self,
        xy: np.ndarray,
        *,
        group: np.ndarray | None = None,
        bearing_deg: np.ndarray | None = None,
        across_factor: float = DEFAULT_ACROSS_FACTOR,
    ) -> None:
        self.xy = np.ascontiguousarray(np.asarray(xy, dtype=float).reshape(-1, 2))
        self.n = len(self.xy)
        if group is None or bearing_deg is None:
            self.group = np.arange(self.n)
            self.framed = self.xy
        else:
            self.group = np.asarray(group, dtype=np.int64)
            self.framed = row_frame(self.xy, bearing_deg, across_factor=across_factor)
        # Python lists: scalar look-ups in local search are much faster than numpy indexing.
        self._x, self._y = self.xy[:, 0].tolist(), self.xy[:, 1].tolist()
        self._u, self._v = self.framed[:, 0].tolist(), self.framed[:, 1].tolist()
        self._g = self.group.tolist()

    def pair(self, i: int, j: int) -> float:
        """Cost between points ``i`` and ``j``."""
        return self.pair_function()(i, j)

    def pair_function(self):
        """A fast scalar ``cost(i, j)`` closure for inner loops of local search."""
        x, y, u, v, g = self._x, self._y, self._u, self._v, self._g
        hypot = math.hypot
        if self.framed is self.xy:

            def euclid(i: int, j: int) -> float:
                return hypot(x[i] - x[j], y[i] - y[j])

            return euclid

        def row_aware(i: int, j: int) -> float:
            if g[i] == g[j]:
                return hypot(u[i] - u[j], v[i] - v[j])
            return hypot(x[i] - x[j], y[i] - y[j])

        return row_aware

    def many(self, i: np.ndarray, j: np.ndarray) -> np.ndarray:
        """Costs between ``i[m]`` and ``j[m]`` for index arrays ``i``, ``j``."""
        i, j = np.broadcast_arrays(np.asarray(i), np.asarray(j))
        same = self.group[i] == self.group[j]
        a = np.where(same[..., None], self.framed[i], self.xy[i])
        b = np.where(same[..., None], self.framed[j], self.xy[j])
        return np.hypot(a[..., 0] - b[..., 0], a[..., 1] - b[..., 1])

    def geometric(self, i: np.ndarray, j: np.ndarray) -> np.ndarray:
        """Plain Euclidean distances (metres walked, not effort)."""
        d = self.xy[np.asarray(j)] - self.xy[np.asarray(i)]
        return np.hypot(d[..., 0], d[..., 1])

    def candidates(self, k: int) -> np.ndarray:
        """The ``k`` cheapest neighbours of every point, cheapest first.

        Euclidean neighbours are over-fetched and re-ranked by cost, so rows
        that are cheap to walk along are found too.
        """
        k = min(k, self.n - 1)
        if k <= 0:
            return np.zeros((self.n, 0), dtype=np.int64)
        fetch = min(self.n, 2 * k + 1)
        _, idx = cKDTree(self.xy).query(self.xy, k=fetch)
        idx = np.asarray(idx).reshape(self.n, fetch)
        own = np.arange(self.n)[:, None]
        cost = self.many(own, idx)
        cost[idx == own] = np.inf
        order = np.argsort(cost, axis=1, kind="stable")[:, :k]
        return np.take_along_axis(idx, order, axis=1)

    def subset(self, idx: np.ndarray) -> Metric:
        """The metric restricted to points ``idx`` (renumbered 0..len-1)."""
        sub = object.__new__(Metric)
        idx = np.asarray(idx, dtype=np.int64)
        sub.xy, sub.group = self.xy[idx], self.group[idx]
        sub.framed = sub.xy if self.framed is self.xy else self.framed[idx]
        sub.n = len(idx)
        sub._x, sub._y = sub.xy[:, 0].tolist(), sub.xy[:, 1].tolist()
        sub._u, sub._v = sub.framed[:, 0].tolist(), sub.framed[:, 1].tolist()
        sub._g = sub.group.tolist()
        return sub
