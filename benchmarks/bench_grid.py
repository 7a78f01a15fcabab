"""Grid vs naive: fieldplan's lattice clip against testing lattice points one by one.

fieldplan lays every block's lattice in one vectorised pass
(:func:`grid_points_many`, as the planner does) and keeps the points inside with
one ``shapely.contains_xy`` call.

The baseline builds the same square lattice over each block's bounding box and
keeps the points for which ``Polygon.contains(Point)`` is true, one call per
point: what a plain script does without shapely 2's array functions. Both are
timed as the median of several alternating runs (fieldplan over many passes per
run, as one pass takes only milliseconds).
"""

from __future__ import annotations

import numpy as np
import shapely

from benchmarks.timing import Result, fast_vs_slow
from benchmarks.workloads import estate
from fieldplan.design.grid import grid_points_many

__all__ = ["naive_grid", "study"]


def naive_grid(polygon, spacing: float, *, origin=(0.0, 0.0), offset=(0.0, 0.0)) -> np.ndarray:
    """Bounding-box lattice filtered point by point with ``Polygon.contains``."""
    minx, miny, maxx, maxy = polygon.bounds
    # The same lattice as fieldplan's at bearing 0 (its first axis points north).
    x0 = origin[0] - offset[1] * spacing
    y0 = origin[1] + offset[0] * spacing
    i0, i1 = int(np.floor((minx - x0) / spacing)), int(np.ceil((maxx - x0) / spacing))
    j0, j1 = int(np.floor((miny - y0) / spacing)), int(np.ceil((maxy - y0) / spacing))
    kept = []
    for j in range(j0, j1 + 1):
        for i in range(i0, i1 + 1):
            x, y = x0 + i * spacing, y0 + j * spacing
            if polygon.contains(shapely.Point(x, y)):
                kept.append((x, y))
    return np.array(kept, dtype=float).reshape(-1, 2)


def study(*, smoke: bool = False, seed: int = 11) -> list[Result]:
    """Time both over the same blocks at 10 points/ha; check they find the same points."""
    blocks = estate(5 if smoke else 60, seed=seed)
    geoms = list(blocks.geometry.values)
    spacing = 31.6227766  # 10 points per hectare
    origin = tuple(np.floor(blocks.total_bounds[:2] / spacing) * spacing)
    offset = (0.37, 0.61)

    def ours():
        xy, block = grid_points_many(geoms, spacing, origin=origin, offset=offset)
        return np.split(xy, np.searchsorted(block, np.arange(1, len(geoms))))

    def naive():
        return [naive_grid(g, spacing, origin=origin, offset=offset) for g in geoms]

    fast, slow = ours(), naive()
    same = all(
        len(a) == len(b) and np.allclose(np.unique(a.round(6), axis=0), np.unique(b.round(6), axis=0))
        for a, b in zip(fast, slow, strict=True)
    )
    inner, runs = (1, 1) if smoke else (20, 7)
    t_ours, t_naive = fast_vs_slow(ours, naive, inner=inner, runs=runs)
    points = int(sum(len(a) for a in fast))
    return [
        Result(
            "grid",
            "grid_points_many (all blocks at once) vs point-by-point Polygon.contains",
            t_naive / t_ours,
            20.0,
            "higher",
            details={
                "blocks": len(geoms),
                "points": points,
                "same_points": bool(same),
                "seconds_fieldplan": round(t_ours, 4),
                "seconds_naive": round(t_naive, 4),
                "timing": f"median of {runs} alternating runs; fieldplan timed over {inner} passes per run",
            },
        )
    ]
