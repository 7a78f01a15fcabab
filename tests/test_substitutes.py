"""Within-cell substitutes of grid points."""

from __future__ import annotations

import numpy as np
import shapely
from scipy.stats import kstest

from fieldplan.design.grid import cell_area, grid_points, lattice_basis
from fieldplan.field.substitutes import cell_coordinates, cell_substitutes


def _grid(layout: str, bearing: float, area):
    xy = grid_points(area, 10.0, layout=layout, bearing_deg=bearing, offset=(0.3, 0.6))
    ids = [f"A-{i:04d}" for i in range(len(xy))]
    return xy, ids


def test_parallelogram_cell_is_a_fundamental_cell():
    # reference: a lattice's fundamental parallelogram has area |det(a, b)|; square s², triangular
    # s²·√3/2 (Conway & Sloane, Sphere Packings, Lattices and Groups, ch. 1; from memory).
    for layout in ("square", "triangular"):
        basis = lattice_basis(7.0, layout, 33.0)
        assert np.isclose(abs(np.linalg.det(basis)), cell_area(7.0, layout))


def test_substitutes_are_uniform_in_their_cell():
    # reference: Kolmogorov-Smirnov test (scipy.stats.kstest) of each cell coordinate against U(0,1);
    # a uniform point of a parallelogram has independent U(0,1) coordinates along its sides.
    area = shapely.box(-400, -400, 400, 400)
    inner = shapely.box(-250, -250, 250, 250)
    for layout, bearing in (("square", 0.0), ("triangular", 27.0)):
        xy, ids = _grid(layout, bearing, inner)
        sub = cell_substitutes(xy, ids, area, seed=4, spacing=10.0, layout=layout, bearing_deg=bearing)
        uv = cell_coordinates(sub, xy, lattice_basis(10.0, layout, bearing))
        assert ((uv >= 0) & (uv < 1)).all()
        take = uv
        assert kstest(take[:, 0], "uniform").pvalue > 1e-3
        assert kstest(take[:, 1], "uniform").pvalue > 1e-3


def test_substitutes_stay_inside_the_sampled_area():
    # reference: shapely (GEOS) containment; the substitute must lie in the same cell and in the area.
    area = shapely.Point(0, 0).buffer(120).difference(shapely.box(-30, -30, 30, 30))
    xy, ids = _grid("square", 15.0, area)
    sub = cell_substitutes(xy, ids, area, seed=1, spacing=10.0, bearing_deg=15.0)
    found = ~np.isnan(sub[:, 0])
    assert found.mean() > 0.95
    assert shapely.contains_xy(area, sub[found, 0], sub[found, 1]).all()
    uv = cell_coordinates(sub[found], xy[found], lattice_basis(10.0, "square", 15.0))
    assert ((uv >= 0) & (uv < 1)).all()


def test_each_substitute_depends_only_on_seed_and_point_id():
    # common practice, no source: a substitute fixed before fieldwork cannot be steered by
    # which other points were marked.
    area = shapely.box(0, 0, 300, 300)
    xy, ids = _grid("square", 0.0, area)
    full = cell_substitutes(xy, ids, area, seed=9, spacing=10.0)
    part = cell_substitutes(xy[5:9], ids[5:9], area, seed=9, spacing=10.0)
    np.testing.assert_array_equal(full[5:9], part)
    other = cell_substitutes(xy[5:9], ids[5:9], area, seed=10, spacing=10.0)
    assert not np.array_equal(part, other)


def test_grid_plan_precomputes_a_substitute_per_point():
    # reference: each substitute lies in its point's lattice cell (cell of lattice point p is
    # p + [-0.5, 0.5)·a + [-0.5, 0.5)·b; Cochran 1977 ch. 8 for the random-start grid).
    import pytest

    from fieldplan.errors import OptionError
    from fieldplan.plan import make_plan
    from tests.geoms import E0, N0, blocks_frame

    blocks = blocks_frame({"A": shapely.box(E0, N0, E0 + 300, N0 + 200)}, row_bearing_deg=[20.0])
    plan = make_plan(blocks, spacing=25, layout="triangular", angle="rows", substitute="within-cell", seed=3)
    subs = plan.layers["substitutes"]
    assert subs["point_id"].tolist() == plan.points["point_id"].tolist()
    xy = shapely.get_coordinates(plan.points.geometry.values)
    uv = cell_coordinates(
        shapely.get_coordinates(subs.geometry.values), xy, lattice_basis(25, "triangular", 20.0)
    )
    assert ((uv >= 0) & (uv < 1)).all()
    assert shapely.contains(blocks.geometry.iloc[0], subs.geometry.values).all()
    with pytest.raises(OptionError):
        make_plan(blocks, design="random", design_options={"per_block": 3}, substitute="within-cell")
