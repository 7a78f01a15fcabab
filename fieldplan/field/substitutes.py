"""Within-cell substitutes for grid points, fixed before anyone goes to the field.

A systematic grid point ``p`` stands for its lattice cell, the parallelogram
``p + [-0.5, 0.5)·a + [-0.5, 0.5)·b`` spanned by the lattice vectors ``a, b``
(:func:`fieldplan.design.grid.lattice_basis`); for the triangular lattice this
parallelogram is a fundamental cell too, with the same area as the hexagon.
If ``p`` cannot be reached, a uniform random point of the same cell (inside the
sampled area) keeps the cell represented. Because the random start already makes
every spot of the cell equally likely to hold the grid point, a uniform
replacement in the cell leaves each spot's chance of being sampled unchanged.

Each substitute comes from its own stream ``stream(seed, "substitute", point_id)``,
so it is fixed by the plan's seed and does not depend on which points are later
marked, nor in what order: choosing it in the field cannot bias it.
"""

from __future__ import annotations

import numpy as np
import shapely
from numpy.typing import ArrayLike

from fieldplan.design.grid import lattice_bases
from fieldplan.rng import stream

__all__ = [
    "cell_substitutes",
    "cell_coordinates",
    "substitutes_layer",
    "SUBSTITUTE_RULES",
    "SUFFIX",
    "SUBSTITUTES_LAYER",
]

#: A substitute's id: its point's id with this suffix.
SUFFIX = "-S"
#: Name of the plan.gpkg layer holding the substitutes.
SUBSTITUTES_LAYER = "substitutes"

SUBSTITUTE_RULES = ("none", "within-cell")
_BATCH = 64
_ROUNDS = 8


def cell_coordinates(xy: ArrayLike, centre: ArrayLike, basis: np.ndarray) -> np.ndarray:
    """Coordinates of ``xy`` in the cell around ``centre``, each in ``[0, 1)`` inside the cell."""
    rel = np.asarray(xy, dtype=float) - np.asarray(centre, dtype=float)
    return rel @ np.linalg.inv(basis) + 0.5


def cell_substitutes(
    xy: ArrayLike,
    point_ids: ArrayLike,
    areas: ArrayLike,
    *,
    seed: int,
    spacing: float,
    layout: str = "square",
    bearing_deg: ArrayLike = 0.0,
) -> np.ndarray:
    """One precomputed substitute per grid point, uniform in its cell within the sampled area.

    Parameters
    ----------
    xy : array_like
        ``(k, 2)`` grid point coordinates in metres.
    point_ids : array_like of str
        Point ids; each keys its own random stream.
    areas : array_like of shapely geometries
        Sampled area (block minus headland and exclusions) of each point; a
        scalar geometry applies to all.
    seed : int
        The plan's seed.
    spacing, layout
        The grid's spacing and layout.
    bearing_deg : float or array_like
        Grid bearing per point (blocks may follow their own rows).

    Returns
    -------
    numpy.ndarray
        ``(k, 2)`` substitute coordinates; NaN where ``8 × 64`` uniform tries in the
        cell all fell outside the sampled area (a cell almost entirely outside it).
    """
    xy = np.asarray(xy, dtype=float).reshape(-1, 2)
    ids = np.asarray(point_ids, dtype=object)
    k = len(xy)
    out = np.full((k, 2), np.nan)
    if k == 0:
        return out
    bearings = np.broadcast_to(np.asarray(bearing_deg, dtype=float), (k,))
    geoms = np.broadcast_to(np.asarray(areas, dtype=object), (k,))
    shapely.prepare(geoms)
    bases = lattice_bases(spacing, layout, bearings)
    generators = [stream(seed, "substitute", str(pid)) for pid in ids]
    pending = np.arange(k)
    for _ in range(_ROUNDS):
        if len(pending) == 0:
            break
        uv = np.stack([generators[i].random((_BATCH, 2)) for i in pending]) - 0.5
        cand = xy[pending, None, :] + np.einsum("pbj,pjk->pbk", uv, bases[pending])
        inside = shapely.contains_xy(
            np.repeat(geoms[pending], _BATCH), cand[..., 0].ravel(), cand[..., 1].ravel()
        ).reshape(len(pending), _BATCH)
        hit = inside.any(axis=1)
        first = np.argmax(inside, axis=1)
        out[pending[hit]] = cand[hit, first[hit]]
        pending = pending[~hit]
    return out


def substitutes_layer(
    points,
    areas: ArrayLike,
    bearings: ArrayLike,
    *,
    seed: int,
    spacing: float,
    layout: str = "square",
):
    """The ``substitutes`` layer of a grid plan: one row per point.

    Parameters
    ----------
    points : geopandas.GeoDataFrame
        The plan's points (``point_id, block, stratum``).
    areas, bearings : array_like
        Sampled area and grid bearing of each point's block, aligned with ``points``.

    Returns
    -------
    geopandas.GeoDataFrame
        ``point_id, substitute_id, block, stratum, geometry``; the geometry is empty
        where no substitute could be placed.
    """
    import geopandas as gpd

    xy = shapely.get_coordinates(points.geometry.values)
    sub = cell_substitutes(
        xy,
        points["point_id"].to_numpy(),
        areas,
        seed=seed,
        spacing=spacing,
        layout=layout,
        bearing_deg=bearings,
    )
    ok = np.isfinite(sub[:, 0])
    geoms = np.full(len(sub), shapely.from_wkt("POINT EMPTY"), dtype=object)
    geoms[ok] = shapely.points(sub[ok])
    return gpd.GeoDataFrame(
        {
            "point_id": points["point_id"].to_numpy(),
            "substitute_id": (points["point_id"].astype(str) + SUFFIX).to_numpy(),
            "block": points["block"].to_numpy(),
            "stratum": points["stratum"].to_numpy(),
        },
        geometry=geoms,
        crs=points.crs,
    )
