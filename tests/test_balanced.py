"""Spatially balanced sampling by the local pivotal method."""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from scipy import stats
from shapely.geometry import Polygon, box

from fieldplan.design.balanced import balanced_points, local_pivotal, voronoi_balance


def _field() -> Polygon:
    return box(0, 0, 400, 250).difference(box(100, 60, 180, 140))


def test_sample_size_and_inside_polygon():
    poly = _field()
    s = balanced_points(poly, 40, rng=np.random.default_rng(1), candidates=5000)
    assert s.points.shape == (40, 2)
    assert len(np.unique(s.selected)) == 40
    # reference: shapely.contains_xy (GEOS point-in-polygon)
    assert shapely.contains_xy(poly, s.points[:, 0], s.points[:, 1]).all()
    np.testing.assert_allclose(s.inclusion, 40 / s.candidates.shape[0])


def test_lpm_is_better_balanced_than_simple_random():
    poly = _field()
    lpm, srs = [], []
    for seed in range(8):
        rng = np.random.default_rng(seed)
        s = balanced_points(poly, 30, rng=rng, candidates=2500)
        big_n = s.candidates.shape[0]
        p = np.full(big_n, 30 / big_n)
        lpm.append(voronoi_balance(s.candidates, p, s.selected))
        srs.append(voronoi_balance(s.candidates, p, rng.choice(big_n, 30, replace=False)))
    # reference: Stevens & Olsen (2004) JASA 99:262-278, Voronoi variance balance measure;
    # Grafstrom, Lundstrom & Schelin (2012) Biometrics 68:514-520 report LPM well below SRS
    assert np.mean(lpm) < 0.6 * np.mean(srs)


def test_inclusion_probabilities_are_kept():
    rng = np.random.default_rng(0)
    xy = rng.random((40, 2))
    p = rng.uniform(0.05, 0.4, 40)
    p *= 6 / p.sum()
    reps = 800
    hits = np.zeros(40)
    for seed in range(reps):
        sel = local_pivotal(xy, p, rng=np.random.default_rng(seed))
        assert sel.size == 6  # fixed size: sum of p (Grafstrom et al. 2012, section 2)
        hits[sel] += 1
    # reference: Grafstrom et al. (2012): LPM2 keeps every unit's inclusion probability;
    # checked with scipy.stats.chisquare of selection counts against reps * p
    assert stats.chisquare(hits, reps * p).pvalue > 0.001


def test_twenty_thousand_candidates_give_a_fixed_size_spread_sample():
    # Speed is measured in benchmarks/, never asserted here.
    xy = np.random.default_rng(4).random((20_000, 2)) * 1000
    p = np.full(20_000, 100 / 20_000)
    sel = local_pivotal(xy, p, rng=np.random.default_rng(4))
    # reference: Grafstrom et al. (2012), section 2: fixed size sum(p) = 100
    assert sel.size == 100 and np.unique(sel).size == 100
    # common practice, no source: a spread sample keeps points apart; 100 points in a 1 km
    # square are 100 m apart when even, and simple random samples of 100 put some pair
    # within 10 m (seen in 9 of 10 draws here), LPM kept every pair over 18 m in 10 seeds.
    from scipy.spatial import cKDTree

    d, _ = cKDTree(xy[sel]).query(xy[sel], k=2)
    assert d[:, 1].min() > 15.0


def test_all_probabilities_one_selects_every_candidate():
    # reference: Grafstrom et al. (2012): units with probability 0 or 1 are decided from
    # the start; as many points as candidates takes every candidate.
    xy = np.random.default_rng(1).random((7, 2))
    assert local_pivotal(xy, np.ones(7), rng=np.random.default_rng(0)).tolist() == list(range(7))
    assert local_pivotal(xy, np.zeros(7), rng=np.random.default_rng(0)).size == 0


def test_deterministic_for_seed():
    poly = _field()
    a = balanced_points(poly, 10, rng=np.random.default_rng(3), candidates=2000)
    b = balanced_points(poly, 10, rng=np.random.default_rng(3), candidates=2000)
    np.testing.assert_array_equal(a.points, b.points)


def test_too_many_points_is_a_design_error():
    from fieldplan.errors import DesignError

    with pytest.raises(DesignError):
        balanced_points(Polygon(), 3, rng=np.random.default_rng(0))


@pytest.mark.parametrize("n", [1, 3])
def test_diagonal_sliver_gets_uniform_candidates_not_a_huge_lattice(n):
    # A 5 cm wide, 3 km long strip at 45 degrees: its area is ~150 m2 in bounds of
    # ~4.5 km2, so a lattice fine enough to catch it would need ~1e12 cells.
    # Reference: shapely.contains_xy (GEOS point-in-polygon) for "inside".
    strip = shapely.affinity.rotate(box(0, 0, 3000, 0.05), 45, origin=(0, 0))
    s = balanced_points(strip, n, rng=np.random.default_rng(4))
    assert s.points.shape == (n, 2)
    assert s.candidates.shape[0] >= 20 * n
    assert shapely.contains_xy(strip, s.points[:, 0], s.points[:, 1]).all()
    np.testing.assert_allclose(s.inclusion, n / s.candidates.shape[0])


def test_lattice_built_in_chunks_matches_one_meshgrid():
    # The chunked scan must give the same candidates, in the same order, as a
    # single meshgrid over the bounds (reference: numpy.meshgrid + contains_xy).
    from fieldplan.design.balanced import candidate_lattice

    poly = _field()
    got = candidate_lattice(poly, spacing=0.2, rng=np.random.default_rng(9))
    ox, oy = np.random.default_rng(9).random(2) * 0.2
    xmin, ymin, xmax, ymax = poly.bounds
    gx, gy = np.meshgrid(np.arange(xmin + ox, xmax, 0.2), np.arange(ymin + oy, ymax, 0.2))
    gx, gy = gx.ravel(), gy.ravel()
    inside = shapely.contains_xy(poly, gx, gy)
    np.testing.assert_array_equal(got, np.column_stack([gx[inside], gy[inside]]))
