"""Systematic grid: lattice geometry, containment, unbiased counts."""

from __future__ import annotations

import math

import numpy as np
import pytest
import shapely
from hypothesis import given, settings
from hypothesis import strategies as st

from fieldplan.design.grid import cell_area, grid_points, lattice_basis, spacing_for_density
from tests.geoms import concave, multipart, nearest_neighbour_distances, with_hole


@pytest.mark.parametrize("layout", ["square", "triangular"])
@pytest.mark.parametrize("bearing", [0.0, 17.0, 133.0])
def test_nearest_neighbour_distance_equals_spacing(layout, bearing):
    # reference: definition of the square and triangular (hexagonal) lattices — every interior
    # point's nearest neighbour is exactly one spacing away.
    poly = shapely.box(0, 0, 1000, 1000)
    xy = grid_points(poly, 37.0, layout=layout, bearing_deg=bearing, offset=(0.31, 0.77))
    interior = shapely.contains_xy(shapely.box(100, 100, 900, 900), xy[:, 0], xy[:, 1])
    nn = nearest_neighbour_distances(xy)[interior]
    assert np.all(np.abs(nn - 37.0) < 0.01)


def test_triangular_rows_are_spacing_sqrt3_over_2_apart():
    # reference: triangular lattice geometry — rows lie s·√3/2 apart.
    basis = lattice_basis(10.0, "triangular", 0.0)
    e1 = basis[0] / np.linalg.norm(basis[0])
    row_gap = abs(e1[0] * basis[1][1] - e1[1] * basis[1][0])
    assert row_gap == pytest.approx(10.0 * math.sqrt(3) / 2, abs=1e-9)
    assert cell_area(10.0, "triangular") == pytest.approx(100 * math.sqrt(3) / 2)


def test_spacing_for_density_round_trips():
    # reference: a square cell of s metres holds 10,000/s² points per hectare (1 ha = 10,000 m²).
    assert spacing_for_density(1.0, "square") == pytest.approx(100.0)
    for layout in ("square", "triangular"):
        s = spacing_for_density(2.5, layout)
        assert 10_000 / cell_area(s, layout) == pytest.approx(2.5)


@pytest.mark.parametrize("layout", ["square", "triangular"])
@pytest.mark.parametrize("geom", [concave, with_hole, multipart], ids=["concave", "hole", "multipart"])
def test_mean_count_over_random_starts_is_area_over_cell(layout, geom):
    # reference: Cochran, Sampling Techniques 3rd ed. (1977), ch. 8 — with a uniform random start the
    # systematic sample is unbiased: E[count in A] = area(A) / cell area.
    rng = np.random.default_rng(20261202)
    spacing = 23.0
    counts = [
        len(grid_points(geom, spacing, layout=layout, bearing_deg=21.0, offset=tuple(rng.random(2))))
        for _ in range(400)
    ]
    expected = geom.area / cell_area(spacing, layout)
    assert np.mean(counts) == pytest.approx(expected, rel=0.02)


@settings(max_examples=60, deadline=None)
@given(
    cx=st.floats(0, 500),
    cy=st.floats(0, 500),
    radius=st.floats(60, 300),
    hole=st.floats(0.1, 0.6),
    spacing=st.floats(8, 60),
    bearing=st.floats(0, 360),
    u=st.floats(0, 0.999),
    v=st.floats(0, 0.999),
    layout=st.sampled_from(["square", "triangular"]),
)
def test_points_always_inside_polygon_with_hole(cx, cy, radius, hole, spacing, bearing, u, v, layout):
    # reference: shapely (GEOS) is the geometry engine of record for point-in-polygon.
    outer = shapely.Point(cx, cy).buffer(radius, quad_segs=3)
    poly = outer.difference(shapely.Point(cx + radius * 0.2, cy).buffer(radius * hole))
    xy = grid_points(poly, spacing, layout=layout, bearing_deg=bearing, offset=(u, v))
    assert np.all(shapely.contains_xy(poly, xy[:, 0], xy[:, 1]))


def _lattice_reference(poly, spacing, layout, bearing, origin, offset):
    """Every lattice point in a generous window, kept by a point-by-point containment test."""
    basis = lattice_basis(spacing, layout, bearing)
    start = np.asarray(origin) + np.asarray(offset) @ basis
    minx, miny, maxx, maxy = poly.bounds
    reach = int(np.ceil(max(maxx - minx, maxy - miny, 1.0) / spacing * 2.5)) + 3
    centre = np.array([(minx + maxx) / 2, (miny + maxy) / 2]) - start
    ci, cj = np.round(centre @ np.linalg.inv(basis)).astype(int)
    ii, jj = np.meshgrid(np.arange(ci - reach, ci + reach + 1), np.arange(cj - reach, cj + reach + 1))
    xy = start + np.column_stack([ii.ravel(), jj.ravel()]) @ basis
    keep = np.array([poly.contains(shapely.Point(x, y)) for x, y in xy])
    return xy[keep]


@pytest.mark.parametrize("chunk", [None, 50])
def test_grid_points_many_matches_a_point_by_point_lattice(monkeypatch, chunk):
    # reference: the lattice definition (start + i·b1 + j·b2) with shapely's Polygon.contains
    # tested point by point; batching blocks (and chunking them) must not change any block's points.
    from fieldplan.design import grid

    if chunk is not None:
        monkeypatch.setattr(grid, "_CHUNK_CANDIDATES", chunk)
    rng = np.random.default_rng(5)
    polys = [
        shapely.affinity.translate(concave, 500_000, 6_000_000),
        None,
        shapely.affinity.translate(with_hole, 500_400, 6_000_000),
        shapely.Polygon(),
        shapely.affinity.translate(multipart, 501_000, 6_000_300),
    ]
    bearings = rng.uniform(0, 360, len(polys))
    offsets = rng.random((len(polys), 2))
    origins = rng.uniform(0, 100, (len(polys), 2)) + [500_000, 6_000_000]
    for layout in ("square", "triangular"):
        xy, block = grid.grid_points_many(
            polys, 13.0, layout=layout, bearing_deg=bearings, origin=origins, offset=offsets
        )
        assert np.all(np.diff(block) >= 0)
        for i, poly in enumerate(polys):
            got = xy[block == i]
            if poly is None or poly.is_empty:
                assert len(got) == 0
                continue
            ref = _lattice_reference(poly, 13.0, layout, bearings[i], origins[i], offsets[i])
            assert len(got) == len(ref) > 0
            np.testing.assert_allclose(np.unique(got.round(6), axis=0), np.unique(ref.round(6), axis=0))
            one = grid_points(
                poly, 13.0, layout=layout, bearing_deg=bearings[i], origin=origins[i], offset=offsets[i]
            )
            assert np.array_equal(one, got)


def test_grid_points_many_stops_after_the_chunk_that_passes_max_total(monkeypatch):
    from fieldplan.design import grid

    monkeypatch.setattr(grid, "_CHUNK_CANDIDATES", 10)
    polys = [shapely.box(100 * k, 0, 100 * k + 90, 90) for k in range(20)]
    xy, block = grid.grid_points_many(polys, 10.0, offset=(0.5, 0.5), max_total=150)
    # 81 points a block: the second block passes 150 and nothing after it is built.
    assert len(xy) == 162 and block.max() == 1
