"""The systematic grid runner: every block's lattice in batched vectorised passes.

A design function of the registry (:data:`fieldplan.spec.DESIGNS`): it takes all
blocks, their sampled areas, the run parameters and the exclusions' union, and
returns the point table and per-block flags.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from fieldplan.design.grid import grid_points_many
from fieldplan.rng import stream
from fieldplan.spec import SpecDesignError

__all__ = ["grid_design"]


def _fallback_point(
    block_geom: shapely.Geometry, area: shapely.Geometry | None, exclusion_union: shapely.Geometry | None, rng: np.random.Generator
) -> tuple[np.ndarray | None, str]:
    """One point for a block the grid missed: random inside the sampled area, else a safe spot.

    Returns ``(None, note)`` when exclusions cover the whole block: no spot is safe.
    """
    if area is not None and not shapely.is_empty(area) and shapely.area(area) > 0:
        minx, miny, maxx, maxy = shapely.bounds(area)
        shapely.prepare(area)
        for _ in range(50):
            xy = rng.uniform((minx, miny), (maxx, maxy), size=(256, 2))
            hit = shapely.contains_xy(area, xy[:, 0], xy[:, 1])
            if hit.any():
                return xy[np.argmax(hit)], "too small for the grid: one random point"
        rep = shapely.get_coordinates(shapely.point_on_surface(area))[0]
        return rep, "too small for the grid: one point on its surface"
    target = block_geom
    if exclusion_union is not None:
        target = shapely.difference(block_geom, exclusion_union)
        if shapely.is_empty(target) or shapely.area(target) <= 0:
            # As the other designs do: an excluded spot is never a sampling point.
            return None, "exclusions cover the block: not sampled"
    rep = shapely.get_coordinates(shapely.point_on_surface(target))[0]
    return rep, "edge buffer leaves nothing: one point on the block's surface"


#: Blocks per vectorised grid pass: large enough that per-call costs vanish, small
#: enough for the progress bar to move on a big farm.
_GRID_BATCH = 500


def _grid_design(
    blocks: gpd.GeoDataFrame,
    areas: np.ndarray,
    params: dict,
    exclusion_union: shapely.Geometry | None,
    progress: Callable[[int, int], None] | None,
) -> tuple[pd.DataFrame, list[list[str]]]:
    seed = params["seed"]
    layout = params["layout"]
    spacing = params["spacing"]
    minx, miny, _, _ = blocks.total_bounds
    # A field-wide start needs one lattice: anchor it at a rounded corner of the whole farm.
    # An engine planning a subset of blocks passes the whole farm's anchor in.
    origin = params.get("grid_origin") or (
        math.floor(minx / spacing) * spacing,
        math.floor(miny / spacing) * spacing,
    )
    n = len(blocks)
    names = blocks["block"].astype(str).to_numpy()
    flags: list[list[str]] = [[] for _ in range(n)]
    if params["start"] == "field":
        offsets = np.asarray(stream(seed, "grid-start", "field").random(2))
        origins = np.asarray(origin, dtype=float)
    else:
        offsets = np.array([stream(seed, "grid-start", name).random(2) for name in names]).reshape(n, 2)
        origins = shapely.bounds(blocks.geometry.values)[:, :2]
    bearing = params["angle"]
    if bearing == "rows":
        bearing = blocks["row_bearing_deg"].to_numpy(dtype=float)
        for i in np.flatnonzero(~np.isfinite(bearing)):
            flags[i].append("no row_bearing_deg: grid not rotated")
        bearing = np.where(np.isfinite(bearing), bearing, 0.0)
    bearing = np.broadcast_to(np.asarray(bearing, dtype=float), (n,))
    origins = np.broadcast_to(np.asarray(origins, dtype=float), (n, 2))
    offsets = np.broadcast_to(np.asarray(offsets, dtype=float), (n, 2))
    # Blocks go through in batches, each one vectorised pass, so the progress bar moves.
    parts_xy, parts_owner, total = [], [], 0
    for first in range(0, n, _GRID_BATCH):
        sl = slice(first, min(first + _GRID_BATCH, n))
        xy, owner = grid_points_many(
            areas[sl],
            spacing,
            layout=layout,
            bearing_deg=bearing[sl],
            origin=origins[sl],
            offset=offsets[sl],
            max_points=params["max_points"],
            max_total=params["max_points"] - total,
        )
        parts_xy.append(xy)
        parts_owner.append(owner + first)
        total += len(xy)
        if progress is not None:
            progress(sl.stop, n)
        if total > params["max_points"]:
            break
    xy, owner = np.concatenate(parts_xy), np.concatenate(parts_owner)
    counts = np.bincount(owner, minlength=n)
    missed = counts == 0
    if missed.any() and owner.size <= params["max_points"]:
        # Blocks the grid missed get one point each; their places in block order are kept below.
        extra_xy, extra_owner = [], []
        for i in np.flatnonzero(missed):
            point, note = _fallback_point(
                blocks.geometry.values[i], areas[i], exclusion_union, stream(seed, "fallback", names[i])
            )
            flags[i].append(note)
            if point is not None:
                extra_xy.append(np.asarray(point, dtype=float).reshape(1, 2))
                extra_owner.append(i)
        xy = np.concatenate([xy, *extra_xy])
        owner = np.concatenate([owner, np.asarray(extra_owner, dtype=owner.dtype)])
        order = np.argsort(owner, kind="stable")
        xy, owner = xy[order], owner[order]
        counts = np.bincount(owner, minlength=n)
    running = np.cumsum(counts)
    over = np.flatnonzero(running > params["max_points"])
    if over.size:
        i = int(over[0])
        raise SpecDesignError(
            "spacing",
            f"the plan would hold more than {params['max_points']:,} points "
            f"(already {int(running[i]):,} after block {names[i]!r}); ".replace("{", "{{").replace("}", "}}")
            + "use a wider {spacing} or lower {per_ha}",
        )
    return pd.DataFrame({"block": pd.Series(names[owner], dtype="str"), "x": xy[:, 0], "y": xy[:, 1]}), flags


#: The grid design's registered runner.
grid_design = _grid_design
