"""Row-model array functions against numpy and shapely doing the same job."""

from __future__ import annotations

import numpy as np
import shapely

from fieldplan.design.clusters import concat_segments, pick_plants, row_segments
from fieldplan.design.scanline import first_distinct, row_pieces, segment_ends


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
    picks = pick_plants(seg, 200, rng=np.random.default_rng(1), skip_row_ends=1)
    within = picks.plant - seg.first_plant[picks.segment]
    ref = shapely.get_coordinates(
        shapely.line_interpolate_point(seg.geometry[picks.segment], seg.offset[picks.segment] + within * 1.3)
    )
    np.testing.assert_allclose(np.column_stack([picks.x, picks.y]), ref, atol=1e-7, rtol=0)
    # every pick keeps one plant clear of each end of its segment
    assert (within >= 1).all() and (within <= seg.plants[picks.segment] - 2).all()


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
    unit, row, start, end = row_pieces(pu, pv, np.zeros(4, dtype=np.int64), 0.5, 1.0, 3)
    assert unit.tolist() == [0, 0, 0]
    assert row.tolist() == [0, 1, 2]
    np.testing.assert_allclose(start, [0.0, 0.0, 0.0])
    np.testing.assert_allclose(end, [0.5 / 1.5 * 10, 10.0, 0.5 / 1.5 * 10])


def test_segment_ends_are_the_row_frame_mapped_back():
    # reference: rotation of the frame (u along the rows, v across) back to x, y by the unit vectors.
    theta = np.radians(30.0)
    u = np.array([np.sin(theta), np.cos(theta)])
    v = np.array([np.cos(theta), -np.sin(theta)])
    ends = segment_ends(np.array([2.0, 5.0]), np.array([1.0, -3.0]), np.array([4.0, 0.5]), u, v)
    np.testing.assert_allclose(ends[0, 0], 2.0 * v + 1.0 * u)
    np.testing.assert_allclose(ends[1, 1], 5.0 * v + 0.5 * u)


def test_ranks_located_as_numpy_searchsorted_on_cumulative_counts():
    # reference: numpy.cumsum + numpy.searchsorted(side="right") over eligible counts per segment.
    from fieldplan.design.scanline import locate_ranks

    rng = np.random.default_rng(7)
    eligible = rng.integers(0, 9, 300).astype(np.int64)
    ranks = rng.choice(int(eligible.sum()), size=500, replace=False).astype(np.int64)
    seg, within = locate_ranks(eligible, ranks, 2)
    cum = np.cumsum(eligible)
    ref = np.searchsorted(cum, ranks, side="right")
    assert np.array_equal(seg, ref)
    assert np.array_equal(within, ranks - (cum[ref] - eligible[ref]) + 2)
    assert (eligible[seg] > 0).all()
