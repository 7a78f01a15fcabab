"""Seeded synthetic workloads: estates of irregular blocks with row attributes.

Blocks are star-shaped polygons (random radii at sorted angles, so always simple)
scaled to an area drawn between ``min_ha`` and ``max_ha``; some carry a hole
(a pond, a building pad) and some are two-part multipolygons (a block cut by a
track). They are laid on a loose grid in UTM zone 33N so they never overlap.
"""

from __future__ import annotations

import math
from pathlib import Path

import geopandas as gpd
import numpy as np
import shapely

__all__ = ["UTM33N", "ORIGIN", "estate", "star_polygon", "write_geojson"]

UTM33N = "EPSG:32633"
#: A spot in central Europe, well inside UTM zone 33N.
ORIGIN = (400_000.0, 5_300_000.0)


def star_polygon(
    rng: np.random.Generator, area_m2: float, *, centre: tuple[float, float] = (0.0, 0.0), vertices: int = 16
) -> shapely.Polygon:
    """A simple, irregular polygon of exactly ``area_m2`` around ``centre``.

    Radii between 0.6 and 1.0 of the maximum at sorted random angles make a
    star-shaped (hence simple) ring; the ring is then scaled to the target area.
    """
    angles = np.sort(rng.uniform(0.0, 2.0 * math.pi, vertices))
    radii = rng.uniform(0.6, 1.0, vertices)
    ring = np.column_stack([radii * np.cos(angles), radii * np.sin(angles)])
    unit = shapely.Polygon(ring)
    scale = math.sqrt(area_m2 / unit.area)
    return shapely.Polygon(ring * scale + np.asarray(centre))


def _block(rng: np.random.Generator, area_m2: float, centre: np.ndarray, kind: str, vertices: int):
    if kind == "multi":
        # Two parts side by side, 60/40 of the area, a 20 m track between them.
        big = star_polygon(rng, 0.6 * area_m2, vertices=vertices)
        small = star_polygon(rng, 0.4 * area_m2, vertices=vertices)
        gap = (shapely.bounds(big)[2] - shapely.bounds(small)[0]) + 20.0
        small = shapely.affinity.translate(small, gap, 0.0)
        shift = (centre[0] - gap / 2.0, centre[1])
        return shapely.affinity.translate(shapely.MultiPolygon([big, small]), *shift)
    outer = star_polygon(rng, area_m2, vertices=vertices)
    if kind == "hole":
        # The ring is star-shaped around the centre, so a disc closer than its
        # nearest edge is strictly inside; the area is restored after cutting it.
        clearance = shapely.distance(shapely.Point(0.0, 0.0), outer.exterior)
        hole = shapely.Point(0.0, 0.0).buffer(clearance * rng.uniform(0.3, 0.6), quad_segs=4)
        outer = shapely.Polygon(outer.exterior.coords, [hole.exterior.coords[::-1]])
        outer = shapely.affinity.scale(outer, *(2 * [math.sqrt(area_m2 / outer.area)]), origin=(0, 0))
    return shapely.affinity.translate(outer, *centre)


def estate(
    n_blocks: int,
    *,
    seed: int = 0,
    min_ha: float = 0.5,
    max_ha: float = 50.0,
    skew: float = 1.5,
    hole_share: float = 0.15,
    multi_share: float = 0.1,
    row_spacing_m: tuple[float, float] = (2.0, 7.0),
    plant_spacing_m: tuple[float, float] = (0.8, 6.0),
    vertices: int = 48,
) -> gpd.GeoDataFrame:
    """``n_blocks`` irregular blocks in UTM 33N with row attributes.

    Parameters
    ----------
    n_blocks : int
        Number of blocks.
    seed : int
        Same seed, same estate.
    min_ha, max_ha : float
        Block area range in hectares.
    skew : float
        Areas are ``min + (max - min) * u**skew`` with ``u`` uniform; 1.5 gives a
        mean of about 20 ha for the default range, so 1,000 blocks ≈ 20,000 ha.
    hole_share, multi_share : float
        Share of blocks with a hole, and of two-part multipolygons.
    row_spacing_m, plant_spacing_m : (float, float)
        Uniform ranges of the row attributes.
    vertices : int
        Vertices of each outline (boundaries walked with a GPS have dozens to hundreds).

    Returns
    -------
    geopandas.GeoDataFrame
        Columns ``block, variety, row_spacing_m, plant_spacing_m, row_bearing_deg, geometry``.
    """
    rng = np.random.default_rng(seed)
    areas = (min_ha + (max_ha - min_ha) * rng.random(n_blocks) ** skew) * 10_000.0
    kinds = rng.choice(
        ["plain", "hole", "multi"], size=n_blocks, p=[1 - hole_share - multi_share, hole_share, multi_share]
    )
    # Cells wide enough for the largest block (a star of 50 ha spans < 1.2 km, a pair < 2 km).
    cell = 2.5 * math.sqrt(max_ha * 10_000.0) + 400.0
    per_row = max(1, math.ceil(math.sqrt(n_blocks)))
    idx = np.arange(n_blocks)
    centres = np.column_stack([idx % per_row, idx // per_row]) * cell + np.asarray(ORIGIN)
    geoms = [_block(rng, a, c, k, vertices) for a, c, k in zip(areas, centres, kinds, strict=True)]
    width = len(str(n_blocks))
    return gpd.GeoDataFrame(
        {
            "block": [f"B{i + 1:0{width}d}" for i in range(n_blocks)],
            "variety": rng.choice(["Riesling", "Pinot noir", "Gala", "Braeburn"], size=n_blocks),
            "row_spacing_m": np.round(rng.uniform(*row_spacing_m, n_blocks), 2),
            "plant_spacing_m": np.round(rng.uniform(*plant_spacing_m, n_blocks), 2),
            "row_bearing_deg": np.round(rng.uniform(0.0, 180.0, n_blocks), 1),
        },
        geometry=geoms,
        crs=UTM33N,
    )


def write_geojson(frame: gpd.GeoDataFrame, path: str | Path) -> Path:
    """Write a workload as WGS84 GeoJSON (RFC 7946), as a field GIS would export it."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    frame.to_crs(4326).to_file(path, driver="GeoJSON", engine="pyogrio")
    return path
