"""Property tests: random blocks (holes, several parts), buffers, exclusions and designs.

Every point lies in its block, at least the edge buffer from the block's edge and
outside every exclusion; counts agree everywhere; the same seed gives the same plan.
"""

from __future__ import annotations

import math

import geopandas as gpd
import numpy as np
import pytest
import shapely
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy.spatial import cKDTree

from fieldplan.plan import DESIGNS, make_plan
from tests.geoms import E0, N0, UTM33N

TOL = 1e-6
PROPS = settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow])
# The point designs cost more per example (balanced: local pivotal method over candidates).
DESIGN_PROPS = settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@st.composite
def block_geometry(draw, x0: float):
    """One or two rotated rectangles (a multipolygon when apart), with up to two round holes."""
    parts = []
    for _ in range(draw(st.integers(1, 2))):
        w, h = draw(st.floats(40, 250)), draw(st.floats(40, 250))
        dx, dy = draw(st.floats(0, 300)), draw(st.floats(0, 300))
        rect = shapely.box(x0 + dx, N0 + dy, x0 + dx + w, N0 + dy + h)
        parts.append(shapely.affinity.rotate(rect, draw(st.floats(0, 90)), origin="centroid"))
    geom = shapely.union_all(parts)
    for _ in range(draw(st.integers(0, 2))):
        centre = shapely.point_on_surface(geom)
        r = draw(st.floats(5, 30))
        shift = draw(st.floats(-40, 40))
        geom = geom.difference(shapely.Point(centre.x + shift, centre.y).buffer(r))
    geom = shapely.make_valid(geom)
    polys = [g for g in shapely.get_parts(geom) if g.geom_type == "Polygon" and g.area > 100]
    return shapely.union_all(polys) if polys else shapely.box(x0, N0, x0 + 100, N0 + 100)


@st.composite
def farm(draw, rows: bool = False):
    """Blocks 1 km apart, optional exclusion circle, edge buffer and seed."""
    n = draw(st.integers(1, 3))
    geoms = [draw(block_geometry(E0 + 1000.0 * i)) for i in range(n)]
    data = {"block": [f"B{i}" for i in range(n)]}
    if rows:
        data["row_spacing_m"] = draw(st.lists(st.floats(2.0, 4.0), min_size=n, max_size=n))
        data["plant_spacing_m"] = draw(st.lists(st.floats(1.0, 2.0), min_size=n, max_size=n))
        data["row_bearing_deg"] = draw(st.lists(st.floats(0, 179), min_size=n, max_size=n))
    else:
        for name in ("row_spacing_m", "plant_spacing_m", "row_bearing_deg"):
            data[name] = [np.nan] * n
    blocks = gpd.GeoDataFrame(data, geometry=geoms, crs=UTM33N)
    exclusions = None
    if draw(st.booleans()):
        centre = shapely.point_on_surface(geoms[0])
        circle = shapely.Point(centre.x, centre.y).buffer(draw(st.floats(5, 40)))
        exclusions = gpd.GeoDataFrame({"name": ["wet spot"]}, geometry=[circle], crs=UTM33N)
    buffer = draw(st.sampled_from([0.0, 0.0, 3.0, 10.0, 25.0]))
    seed = draw(st.integers(0, 2**31 - 1))
    return blocks, exclusions, buffer, seed


def _check_points(plan, blocks, exclusions, buffer):
    """Inside the block, outside exclusions, beyond the edge buffer; counts consistent."""
    pts = plan.points
    assert pts["point_id"].is_unique
    assert plan.meta["counts"]["points"] == len(pts)
    counts = pts.groupby("block").size()
    for row in plan.blocks.itertuples(index=False):
        assert row.n_points == counts.get(row.block, 0)
    geom_of = dict(zip(blocks["block"], blocks.geometry.values, strict=True))
    flags_of = dict(zip(plan.blocks["block"], plan.blocks["flags"], strict=True))
    excl = shapely.union_all(exclusions.geometry.values) if exclusions is not None else None
    for name, group in pts.groupby("block"):
        xy = shapely.get_coordinates(group.geometry.values)
        geom = geom_of[name]
        # reference: shapely (GEOS) point-in-polygon and distance, outside the planner's own code.
        assert shapely.dwithin(geom, shapely.points(xy), TOL).all(), name
        if excl is not None:
            assert not shapely.contains_properly(shapely.buffer(excl, -TOL), shapely.points(xy)).any(), name
        if buffer > 0 and "edge buffer" not in flags_of[name]:
            edge = shapely.distance(shapely.boundary(geom), shapely.points(xy))
            assert (edge >= buffer - TOL).all(), (name, edge.min())


def _lattice_oracle(area, first: np.ndarray, spacing: float, layout: str, bearing: float) -> np.ndarray:
    """Every point of the lattice through ``first`` that falls inside ``area`` (definition of the grid)."""
    t = math.radians(bearing)
    e1 = np.array([math.sin(t), math.cos(t)])  # along the bearing, clockwise from north
    e2 = np.array([-math.cos(t), math.sin(t)])  # square lattice: perpendicular
    if layout == "triangular":
        # reference: equilateral triangular lattice, second vector at 60 degrees to the first.
        e2 = 0.5 * e1 + (math.sqrt(3) / 2) * e2
    basis = spacing * np.vstack([e1, e2])
    minx, miny, maxx, maxy = shapely.bounds(area)
    corners = np.array([[minx, miny], [minx, maxy], [maxx, miny], [maxx, maxy]]) - first
    ij = corners @ np.linalg.inv(basis)
    lo, hi = np.floor(ij.min(axis=0)) - 1, np.ceil(ij.max(axis=0)) + 1
    ii, jj = np.meshgrid(np.arange(lo[0], hi[0] + 1), np.arange(lo[1], hi[1] + 1))
    xy = first + np.column_stack([ii.ravel(), jj.ravel()]) @ basis
    return xy[shapely.contains_xy(area, xy[:, 0], xy[:, 1])]


def _assert_same_points(expected: np.ndarray, got: np.ndarray, atol: float) -> None:
    """Each point of ``got`` within ``atol`` of its own point of ``expected``, one to one.

    Matched by nearest neighbour rather than by sorting: two points whose x differ only in
    the last bits would otherwise sort in either order.
    """
    assert len(expected) == len(got)
    if len(got) == 0:
        return
    dist, which = cKDTree(expected).query(got)
    assert dist.max() <= atol, dist.max()
    assert np.unique(which).size == len(got)


@given(
    farm(),
    st.floats(12, 60),
    st.sampled_from(["square", "triangular"]),
    st.sampled_from(["field", "block"]),
    st.floats(0, 179),
)
@PROPS
def test_grid_properties(case, spacing, layout, start, angle):
    blocks, exclusions, buffer, seed = case
    kwargs = dict(spacing=spacing, layout=layout, start=start, angle=angle, edge_buffer=buffer, seed=seed)
    plan = make_plan(blocks, exclusions=exclusions, **kwargs)
    _check_points(plan, blocks, exclusions, buffer)
    # Exact counts: a block's points are all the lattice points inside its sampled area, no more.
    excl = shapely.union_all(exclusions.geometry.values) if exclusions is not None else None
    for row in plan.blocks.itertuples(index=False):
        mine = shapely.get_coordinates(plan.points[plan.points["block"] == row.block].geometry.values)
        if row.flags or len(mine) == 0:
            continue
        geom = blocks.loc[blocks["block"] == row.block].geometry.iloc[0]
        area = shapely.buffer(geom, -buffer, join_style="mitre") if buffer > 0 else geom
        area = shapely.difference(area, excl) if excl is not None else area
        expected = _lattice_oracle(area, mine[0], spacing, layout, angle)
        assert len(expected) == len(mine)
        _assert_same_points(expected, mine, atol=1e-6)
    # Determinism: same seed, same points; block order does not matter.
    again = make_plan(blocks.iloc[::-1].reset_index(drop=True), exclusions=exclusions, **kwargs)
    a = plan.points.sort_values("point_id")
    b = again.points.sort_values("point_id")
    assert a["point_id"].tolist() == b["point_id"].tolist()
    np.testing.assert_array_equal(
        shapely.get_coordinates(a.geometry.values), shapely.get_coordinates(b.geometry.values)
    )


OTHER_DESIGNS = [d for d in ("random", "balanced", "clusters") if d in DESIGNS]


@pytest.mark.skipif(not OTHER_DESIGNS, reason="no random/balanced/clusters design registered")
@pytest.mark.parametrize("design", OTHER_DESIGNS)
@given(data=st.data())
@DESIGN_PROPS
def test_other_design_properties(design, data):
    blocks, exclusions, buffer, seed = data.draw(farm(rows=design == "clusters"))
    per_block = data.draw(st.integers(1, 5))
    kwargs = dict(design=design, edge_buffer=buffer, seed=seed, design_options={"per_block": per_block})
    plan = make_plan(blocks, exclusions=exclusions, **kwargs)
    _check_points(plan, blocks, exclusions, buffer)
    # Exact counts: --per-block n gives n points (clusters: n plants) in every block still sampled.
    for row in plan.blocks.itertuples(index=False):
        if not row.flags:
            assert row.n_points == per_block, (row.block, row.n_points)
    again = make_plan(blocks, exclusions=exclusions, **kwargs)
    np.testing.assert_array_equal(
        shapely.get_coordinates(plan.points.geometry.values),
        shapely.get_coordinates(again.points.geometry.values),
    )
    assert plan.points["point_id"].tolist() == again.points["point_id"].tolist()
