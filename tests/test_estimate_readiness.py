"""Readiness probability and projected target date."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from fieldplan.estimate.readiness import prob_reached, project_blocks, project_date


def test_prob_reached_is_t_cdf():
    p = prob_reached([21.0, 23.5], [0.8, 0.5], [9, 4], 22.0)
    # reference: scipy.stats.t — P(mu >= target) = F_t((ybar - target)/se; df)
    assert p[0] == pytest.approx(stats.t.cdf((21.0 - 22.0) / 0.8, 9), abs=1e-12)
    assert p[1] == pytest.approx(stats.t.cdf((23.5 - 22.0) / 0.5, 4), abs=1e-12)
    assert np.isnan(prob_reached(20.0, np.nan, np.nan, 22.0))


def test_two_rounds_project_by_straight_line():
    p = project_date(["2026-02-01", "2026-02-11"], [18.0, 20.0], [0.1, 0.1], 23.0)
    # reference: straight line through two points, 0.2 per day reaches 23 after
    # 15 more days — elementary algebra
    assert p.slope_per_day == pytest.approx(0.2)
    assert p.date == pd.Timestamp("2026-02-26")
    assert p.date_lower < p.date < p.date_upper


def test_weighted_slope_matches_statsmodels():
    sm = pytest.importorskip("statsmodels.api")
    t = np.array([0.0, 7.0, 14.0, 21.0])
    y = np.array([17.9, 19.6, 21.4, 22.9])
    se = np.array([0.3, 0.25, 0.4, 0.3])
    dates = pd.Timestamp("2026-02-01") + pd.to_timedelta(t, unit="D")
    p = project_date(dates, y, se, 24.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fit = sm.WLS(y, sm.add_constant(t), weights=1 / se**2).fit(cov_type="fixed scale")
    # reference: statsmodels WLS with known variances (cov_type='fixed scale'); these
    # points fit within their errors so no lack-of-fit inflation applies
    chi2 = np.sum((y - fit.fittedvalues) ** 2 / se**2) / 2
    assert chi2 <= 1.0
    assert p.slope_per_day == pytest.approx(fit.params[1], abs=1e-10)
    assert p.slope_se == pytest.approx(fit.bse[1], abs=1e-10)
    # the projected day solves a + b t = 24 on the fitted line
    t_star = (24.0 - fit.params[0]) / fit.params[1]
    assert p.date == (pd.Timestamp("2026-02-01") + pd.Timedelta(days=t_star)).round("D")


def test_flat_trend_gives_no_date():
    p = project_date(["2026-02-01", "2026-02-08"], [20.0, 20.1], [0.5, 0.5], 23.0)
    # reference: Fieller (1954) — a ratio with a slope not distinguishable from 0 has
    # no finite interval, so no date is projected
    assert p.date is None and "flat" in p.note


def test_project_blocks_table():
    rounds = pd.DataFrame(
        {
            "group": ["B01", "B01", "B02"],
            "date": ["2026-02-01", "2026-02-11", "2026-02-01"],
            "mean": [18.0, 20.0, 19.0],
            "se": [0.1, 0.1, 0.2],
        }
    )
    tab = project_blocks(rounds, 23.0).set_index("group")
    # reference: elementary algebra as in test_two_rounds_project_by_straight_line
    assert tab.loc["B01", "target_date"] == pd.Timestamp("2026-02-26")
    assert tab.loc["B02", "rounds"] == 1 and pd.isna(tab.loc["B02", "target_date"])
