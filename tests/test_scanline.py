"""Compiled row-model kernels against numpy and shapely doing the same job."""

from __future__ import annotations

import numpy as np
import shapely

from fieldplan.design.clusters import concat_segments, pick_plants, row_segments
from fieldplan.design.scanline import first_distinct, locate_plants, row_pieces


def test_first_distinct_matches_numpy_unique_first_occurrences():
    # reference: numpy.unique(return_index=True) gives the index of each value's first occurrence.
    rng = np.random.default_rng(3)
    for size, high, n in [(0, 5, 3), (1, 5, 1), (41, 50, 30), (500, 40, 45), (2000, 10**9, 1500)]:
        values = rng.integers(0, high, size=size, dtype=np.int64)
        _, first = np.unique(values, return_index=True)
        expected = values[np.sort(first)][:n]
        assert np.array_equal(first_distinct(values, n), expected)


def test_plants_located_as_shapely_interpolates_along_the_segment():
    # reference: shapely.line_interpolate_point on the same segment LineStrings.
    block = shapely.Polygon(
        [(0, 0), (180, 20), (160, 140), (40, 120), (60, 60)], [[(80, 60), (100, 60), (90, 80)]]
    )
    seg = row_segments(block, row_spacing_m=2.7, plant_spacing_m=1.3, row_bearing_deg=63.0)
    ranks = np.random.default_rng(1).choice(seg.total_plants, size=200, replace=False)
    eligible = seg.plants.astype(np.int64)
    at, within, xy = locate_plants(eligible, ranks, 0, seg.offset, np.array([1.3]), seg.ends, seg.length)
    cum = np.cumsum(eligible)
    ref_seg = np.searchsorted(cum, ranks, side="right")
    assert np.array_equal(at, ref_seg)
    ref = shapely.get_coordinates(
        shapely.line_interpolate_point(seg.geometry[ref_seg], seg.offset[ref_seg] + within * 1.3)
    )
    np.testing.assert_allclose(xy, ref, atol=1e-7, rtol=0)


def test_mixed_plant_spacings_after_joining_blocks():
    # reference: shapely.line_interpolate_point; each block keeps its own plant spacing once joined.
    a = row_segments(shapely.box(0, 0, 50, 40), row_spacing_m=2.0, plant_spacing_m=1.0, row_bearing_deg=0)
    b = row_segments(shapely.box(100, 0, 160, 40), row_spacing_m=3.0, plant_spacing_m=1.7, row_bearing_deg=90)
    joined, which = concat_segments([a, b])
    picks = pick_plants(joined, 300, rng=np.random.default_rng(4))
    step = joined.plant_spacing[picks.segment]
    within = picks.plant - joined.first_plant[picks.segment]
    ref = shapely.get_coordinates(
        shapely.line_interpolate_point(
            joined.geometry[picks.segment], joined.offset[picks.segment] + within * step
        )
    )
    np.testing.assert_allclose(np.column_stack([picks.x, picks.y]), ref, atol=1e-7, rtol=0)
    assert set(which[picks.segment]) == {0, 1}


def test_row_through_a_vertex_counts_the_crossing_once():
    # reference: the even-odd rule with half-open edges (a vertex on a row line is counted once
    # unless it is a local extreme) — a triangle with its apex exactly on row 1.
    # Rows at v = 0.5 + k (bearing 0: v is x); the apex (1.5, 10) lies on row k = 1.
    tri = np.array([[0.0, 0.0], [1.5, 10.0], [3.0, 0.0], [0.0, 0.0]])
    # frame for bearing 0: u = y (along), v = x (across)
    pu, pv = tri[:, 1].copy(), tri[:, 0].copy()
    row, start, end = row_pieces(pu, pv, np.zeros(4, dtype=np.int64), 0.5, 1.0, 3)
    assert row.tolist() == [0, 1, 2]
    np.testing.assert_allclose(start, [0.0, 0.0, 0.0])
    np.testing.assert_allclose(end, [0.5 / 1.5 * 10, 10.0, 0.5 / 1.5 * 10])
