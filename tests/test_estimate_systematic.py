"""Grid estimates: SRS variance and the successive-difference local variance."""

from __future__ import annotations

import numpy as np
import pytest

from fieldplan.estimate.systematic import hilbert_order, successive_difference_se, systematic_mean


def test_successive_difference_on_transect_matches_wolter():
    y = np.array([3.0, 4.0, 6.0, 5.0, 8.0, 9.0, 11.0])
    x = np.arange(7) * 10.0
    got = successive_difference_se(y, x, np.zeros(7))
    # reference: Wolter, Introduction to Variance Estimation 2nd ed. (2007), §8.2,
    # v2 = (1-f)/n * sum (y_i - y_{i-1})^2 / (2(n-1)), computed by hand along the transect
    n = 7
    v2 = sum((y[i] - y[i - 1]) ** 2 for i in range(1, n)) / (2 * n * (n - 1))
    assert got == pytest.approx(v2**0.5, abs=1e-12)


def test_hilbert_order_visits_grid_neighbours():
    xx, yy = np.meshgrid(np.arange(16.0), np.arange(16.0))
    o = hilbert_order(xx.ravel(), yy.ravel())
    steps = np.hypot(np.diff(xx.ravel()[o]), np.diff(yy.ravel()[o]))
    # reference: a Hilbert curve on a 2^k x 2^k lattice moves one cell at a time
    # (Hilbert 1891, Math. Ann. 38:459-460)
    assert np.all(steps == 1.0)
    assert sorted(o.tolist()) == list(range(256))


def test_systematic_srs_se_and_trend_surface():
    xx, yy = np.meshgrid(np.arange(10.0), np.arange(10.0))
    x, y = xx.ravel() * 20, yy.ravel() * 20
    v = 15 + 0.02 * x + 0.03 * y  # a smooth trend across the block
    est = systematic_mean(v, x, y)
    # reference: SRS standard error s/sqrt(n) (Cochran 1977, eq. 2.16)
    assert est.se_srs == pytest.approx(v.std(ddof=1) / 10.0, abs=1e-12)
    # reference: Wolter (2007) §8.2 — on a linear trend the SRS formula overstates
    # the variance of a systematic sample and local differences remove the trend.
    assert est.local_to_srs < 0.3
    assert est.lower_local > est.lower_srs


def test_one_point_has_no_interval():
    est = systematic_mean([4.2], [0.0], [0.0])
    # reference: a variance needs n >= 2 (Cochran 1977, eq. 2.16)
    assert est.mean == 4.2 and np.isnan(est.se_srs) and "1 point" in est.note
