"""Within-cell substitutes of soil points belong to the point's lattice cell, even when the core
buffer moved the point inward."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import shapely

from fieldplan.field.substitutes import SUBSTITUTES_LAYER
from fieldplan.plan import make_plan
from fieldplan.read import read_blocks

DEMO_BLOCKS = Path(__file__).resolve().parents[1] / "demo_plots" / "estate_blocks.geojson"


def test_moved_soil_points_keep_the_substitute_of_their_cell():
    blocks = read_blocks(DEMO_BLOCKS)
    common = {"spacing": 100.0, "substitute": "within-cell"}
    general = make_plan(blocks, {**common}, seed=7)
    soil = make_plan(blocks, {**common, "purpose": "soil"}, seed=7)
    moved = soil.points["moved_m"].to_numpy(dtype=float) > 0
    assert moved.any()  # the demo's 30 m core buffer moves some points inward
    a = general.layers[SUBSTITUTES_LAYER].set_index("point_id")
    b = soil.layers[SUBSTITUTES_LAYER].set_index("point_id")
    assert list(a.index) == list(b.index)
    # The within-cell rule (docs/field-changes.md): a substitute lies in the lattice cell of
    # its design point, so it cannot depend on where the soil stage moved the point
    # (common practice, no source).
    xa = shapely.get_coordinates(a.geometry.values)
    xb = shapely.get_coordinates(b.geometry.values)
    assert np.allclose(xa, xb, atol=1e-6)
    design = shapely.get_coordinates(general.points.set_index("point_id").loc[a.index].geometry.values)
    half_diagonal = 100.0 * np.sqrt(2) / 2
    assert (np.hypot(*(xa - design).T) <= half_diagonal + 1e-6).all()
