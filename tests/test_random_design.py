"""Simple random points in a polygon."""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from scipy import stats
from shapely.geometry import MultiPolygon, Polygon, box

from fieldplan.design.random import random_points
from fieldplan.errors import DesignError


def _holed() -> MultiPolygon:
    outer = Polygon(
        [(0, 0), (120, 0), (120, 80), (60, 110), (0, 80)],
        holes=[
            [(20, 20), (50, 20), (50, 50), (20, 50)],
        ],
    )
    return MultiPolygon([outer, box(200, 0, 230, 30)])


def test_points_fall_inside_polygon_with_holes():
    poly = _holed()
    pts = random_points(poly, 2000, rng=np.random.default_rng(1))
    assert pts.shape == (2000, 2)
    # reference: shapely.contains_xy (GEOS point-in-polygon)
    assert shapely.contains_xy(poly, pts[:, 0], pts[:, 1]).all()
    hole = box(20, 20, 50, 50)
    assert not shapely.contains_xy(hole, pts[:, 0], pts[:, 1]).any()


def test_share_in_each_part_follows_area():
    poly = _holed()
    pts = random_points(poly, 4000, rng=np.random.default_rng(2))
    small = box(200, 0, 230, 30)
    k = int(shapely.contains_xy(small, pts[:, 0], pts[:, 1]).sum())
    # reference: scipy.stats.binomtest; a uniform point lands in a part with prob area share
    p = small.area / poly.area
    assert stats.binomtest(k, 4000, p).pvalue > 0.001


def test_uniform_on_rectangle_ks():
    pts = random_points(box(10, -5, 110, 45), 3000, rng=np.random.default_rng(3))
    # reference: scipy.stats.kstest against the uniform distribution on each side
    assert stats.kstest(pts[:, 0], "uniform", args=(10, 100)).pvalue > 0.001
    assert stats.kstest(pts[:, 1], "uniform", args=(-5, 50)).pvalue > 0.001


def test_same_seed_same_points_and_draw_order():
    poly = _holed()
    a = random_points(poly, 50, rng=np.random.default_rng(9))
    b = random_points(poly, 50, rng=np.random.default_rng(9))
    np.testing.assert_array_equal(a, b)
    assert random_points(poly, 0, rng=np.random.default_rng(9)).shape == (0, 2)


def test_empty_polygon_is_a_design_error():
    with pytest.raises(DesignError):
        random_points(Polygon(), 5, rng=np.random.default_rng(0))


def test_thin_diagonal_strip_is_sampled_uniformly_through_triangles():
    # An L of two 2 m wide strips (600 m and 300 m long) turned 30 degrees fills
    # under 2 % of its bounds, so points come from the triangulation. Uniformity:
    # the share in each arm should follow its area (chi-square, scipy.stats), and
    # positions along the long arm should be uniform (Kolmogorov-Smirnov).
    long_arm, short_arm = box(0, 0, 600, 2), box(0, 2, 2, 302)
    strip = shapely.affinity.rotate(shapely.union_all([long_arm, short_arm]), 30, origin=(0, 0))
    xmin, ymin, xmax, ymax = strip.bounds
    assert strip.area / ((xmax - xmin) * (ymax - ymin)) < 0.05
    xy = random_points(strip, 4000, rng=np.random.default_rng(12))
    assert shapely.contains_xy(strip, xy[:, 0], xy[:, 1]).all()
    back = shapely.affinity.rotate(shapely.MultiPoint(xy), -30, origin=(0, 0))
    local = shapely.get_coordinates(back)
    in_long = local[:, 1] < 2
    expected = np.array([long_arm.area, short_arm.area]) / strip.area * len(xy)
    observed = np.array([in_long.sum(), (~in_long).sum()])
    assert stats.chisquare(observed, expected).pvalue > 0.001
    assert stats.kstest(local[in_long, 0] / 600, "uniform").pvalue > 0.001
