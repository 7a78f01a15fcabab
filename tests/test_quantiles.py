"""Normal and t quantiles without scipy, checked against scipy.stats."""

from __future__ import annotations

import pytest
from scipy import stats

from fieldplan.design.quantiles import norm_ppf, t_cdf, t_ppf

PROBS = [0.6, 0.8, 0.9, 0.95, 0.975, 0.99, 0.995, 0.9995, 0.05, 0.025, 0.001]
DFS = [1, 2, 3, 4, 5, 7, 10, 19, 30, 99, 500, 999, 1000, 1001, 5000, 10**5, 10**7]


@pytest.mark.parametrize("df", DFS)
def test_t_quantiles_match_scipy(df):
    for p in PROBS:
        # reference: scipy.stats.t.ppf
        assert t_ppf(p, df) == pytest.approx(stats.t.ppf(p, df), rel=1e-12)


def test_t_cdf_matches_scipy():
    for df in (1, 2, 3, 8, 25, 300):
        for t in (-4.0, -1.3, 0.0, 0.2, 1.96, 7.5):
            # reference: scipy.stats.t.cdf; Abramowitz & Stegun 1964, 26.7.3-26.7.4
            assert t_cdf(t, df) == pytest.approx(stats.t.cdf(t, df), rel=1e-13, abs=1e-15)


def test_textbook_t_values():
    # reference: the printed t table (two-sided 95 %): 12.706 (1 df), 2.228 (10 df), 2.042 (30 df)
    assert round(t_ppf(0.975, 1), 3) == 12.706
    assert round(t_ppf(0.975, 10), 3) == 2.228
    assert round(t_ppf(0.975, 30), 3) == 2.042


def test_close_to_the_median_follows_the_density():
    # Near p = 1/2, t = (p - 1/2) / f(0) to first order; f(0) = 3/8 for 4 df.
    # reference: Student t density at 0, Gamma(5/2) / (sqrt(4 pi) Gamma(2)) = 0.375
    assert t_ppf(0.5 + 1e-7, 4) == pytest.approx(1e-7 / 0.375, rel=1e-6)


def test_normal_quantiles_match_scipy():
    for p in PROBS:
        # reference: scipy.stats.norm.ppf
        assert norm_ppf(p) == pytest.approx(stats.norm.ppf(p), rel=1e-13)


def test_rejects_bad_arguments():
    with pytest.raises(ValueError):
        t_ppf(0.975, 0)
    with pytest.raises(ValueError):
        t_ppf(1.0, 5)
