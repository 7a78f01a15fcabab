"""Random points: fieldplan's sampler against geopandas' ``GeoSeries.sample_points``.

Both draw the same number of uniform random points in each block (5 per
hectare); geopandas returns one MultiPoint per block, fieldplan an array per
block. The ratio is geopandas' time over fieldplan's: 1.0 is parity.
"""

from __future__ import annotations

import numpy as np
import shapely

from benchmarks.timing import Result, alternating
from benchmarks.workloads import estate
from fieldplan.design.random import random_points
from fieldplan.rng import stream

__all__ = ["study"]


def study(*, smoke: bool = False, seed: int = 12) -> list[Result]:
    """Time both on the same blocks and counts; check each point lies in its block."""
    blocks = estate(10 if smoke else 400, seed=seed)
    geoms = list(blocks.geometry.values)
    counts = np.maximum(1, np.round(blocks.area.to_numpy() / 10_000.0 * 5)).astype(int)

    def ours():
        return [
            random_points(g, int(n), rng=stream(seed, "random", str(i)))
            for i, (g, n) in enumerate(zip(geoms, counts, strict=True))
        ]

    def theirs():
        return blocks.geometry.sample_points(size=counts, rng=seed)

    mine = ours()
    inside = all(
        bool(shapely.contains_xy(g, xy[:, 0], xy[:, 1]).all()) and len(xy) == n
        for g, xy, n in zip(geoms, mine, counts, strict=True)
    )
    other = theirs()
    same_counts = bool((shapely.get_num_geometries(other.values) == counts).all())
    t_ours, t_theirs = alternating(ours, theirs, repeat=1 if smoke else 3)
    return [
        Result(
            "random",
            "random_points vs GeoSeries.sample_points",
            t_theirs / t_ours,
            1.0,
            "higher",
            details={
                "blocks": len(geoms),
                "points": int(counts.sum()),
                "all_inside": inside,
                "geopandas_counts_match": same_counts,
                "seconds_fieldplan": round(t_ours, 4),
                "seconds_geopandas": round(t_theirs, 4),
            },
        )
    ]
