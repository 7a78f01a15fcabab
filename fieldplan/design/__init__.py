"""Sampling designs: pure functions over numpy arrays and shapely geometries, no I/O."""

from fieldplan.design.grid import (
    LAYOUTS,
    cell_area,
    expected_count,
    grid_points,
    lattice_basis,
    spacing_for_density,
)

__all__ = [
    "LAYOUTS",
    "cell_area",
    "expected_count",
    "grid_points",
    "lattice_basis",
    "spacing_for_density",
]
