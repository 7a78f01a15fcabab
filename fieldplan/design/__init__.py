"""Sampling designs: pure functions over numpy arrays and shapely geometries, no I/O."""

from fieldplan.design.allocation import (
    ALLOCATION_METHODS,
    Allocation,
    allocate,
    largest_remainder,
    weights_for,
)
from fieldplan.design.balanced import (
    BalancedSample,
    balanced_points,
    candidate_lattice,
    local_pivotal,
    voronoi_balance,
)
from fieldplan.design.clusters import (
    PlantPicks,
    RowSegments,
    cluster_count,
    cluster_sizes,
    eligible_plants,
    pick_plants,
    row_segments,
    rows_from_lines,
    sample_ranks,
)
from fieldplan.design.grid import (
    LAYOUTS,
    cell_area,
    expected_count,
    grid_points,
    lattice_basis,
    spacing_for_density,
)
from fieldplan.design.random import random_points
from fieldplan.design.samplesize import SampleSize, design_effect, n_clusters, sample_size

__all__ = [
    "LAYOUTS",
    "cell_area",
    "expected_count",
    "grid_points",
    "lattice_basis",
    "spacing_for_density",
    "ALLOCATION_METHODS",
    "Allocation",
    "BalancedSample",
    "PlantPicks",
    "RowSegments",
    "SampleSize",
    "allocate",
    "balanced_points",
    "candidate_lattice",
    "cluster_count",
    "cluster_sizes",
    "design_effect",
    "eligible_plants",
    "largest_remainder",
    "local_pivotal",
    "n_clusters",
    "pick_plants",
    "random_points",
    "row_segments",
    "rows_from_lines",
    "sample_ranks",
    "sample_size",
    "voronoi_balance",
    "weights_for",
]
