"""Baselines other studies compare fieldplan against: numpy and shapely only, no fieldplan import,
so a whole-process baseline pays for nothing of ours."""

from __future__ import annotations

import numpy as np
import shapely

__all__ = ["enumerate_and_choose"]


def enumerate_and_choose(
    polygon, *, row_spacing_m: float, plant_spacing_m: float, row_bearing_deg: float, n: int, rng
) -> np.ndarray:
    """Every plant position in the block, then ``n`` of them at random: ``(n, 2)`` coordinates."""
    theta = np.radians(row_bearing_deg)
    u = np.array([np.sin(theta), np.cos(theta)])
    v = np.array([np.cos(theta), -np.sin(theta)])
    xy = shapely.get_coordinates(polygon)
    pu, pv = xy @ u, xy @ v
    across = np.arange(pv.min() + row_spacing_m / 2.0, pv.max(), row_spacing_m)
    along = np.arange(pu.min() + plant_spacing_m / 2.0, pu.max(), plant_spacing_m)
    a, b = np.meshgrid(along, across)
    px = a.ravel() * u[0] + b.ravel() * v[0]
    py = a.ravel() * u[1] + b.ravel() * v[1]
    shapely.prepare(polygon)
    inside = shapely.contains_xy(polygon, px, py)
    plants = np.column_stack([px[inside], py[inside]])
    if len(plants) == 0:  # a sliver narrower than one row
        return plants
    return plants[rng.choice(len(plants), size=min(n, len(plants)), replace=False)]
