"""Sampling designs: pure functions over numpy arrays and shapely geometries, no I/O.

Names load lazily: a grid plan must not pay for scipy, numba or the estimators of the other
designs (``import fieldplan.design.grid`` imports only what the grid needs).
"""

from __future__ import annotations

import importlib

_LAZY = {
    "fieldplan.design.allocation": (
        "ALLOCATION_METHODS",
        "Allocation",
        "allocate",
        "largest_remainder",
        "weights_for",
    ),
    "fieldplan.design.balanced": (
        "BalancedSample",
        "balanced_points",
        "candidate_lattice",
        "local_pivotal",
        "voronoi_balance",
    ),
    "fieldplan.design.clusters": (
        "PlantPicks",
        "RowSegments",
        "block_row_segments",
        "block_rows_from_lines",
        "cluster_count",
        "cluster_sizes",
        "eligible_plants",
        "pick_plants",
        "pick_plants_many",
        "row_segments",
        "rows_from_lines",
        "sample_ranks",
    ),
    "fieldplan.design.grid": (
        "LAYOUTS",
        "cell_area",
        "expected_count",
        "grid_points",
        "lattice_basis",
        "spacing_for_density",
    ),
    "fieldplan.design.random": ("random_points",),
    "fieldplan.design.samplesize": ("SampleSize", "design_effect", "n_clusters", "sample_size"),
}
_MODULE_OF = {name: module for module, names in _LAZY.items() for name in names}

__all__ = sorted(_MODULE_OF)


def __getattr__(name: str) -> object:
    module = _MODULE_OF.get(name)
    if module is None:
        raise AttributeError(f"module 'fieldplan.design' has no attribute {name!r}")
    return getattr(importlib.import_module(module), name)


def __dir__() -> list[str]:
    return sorted([*globals(), *__all__])
