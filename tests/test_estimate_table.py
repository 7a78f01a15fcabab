"""The estimates table picks the estimator matching the plan's design."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from shapely import points as make_points

from fieldplan.estimate.table import estimate_table


def _plan(n_per_block=(4, 3)):
    ids, blocks, xs = [], [], []
    for b, k in zip(["B1", "B2"], n_per_block, strict=True):
        for i in range(k):
            ids.append(f"{b}-{i + 1:03d}")
            blocks.append(b)
            xs.append(10.0 * i)
    pts = gpd.GeoDataFrame(
        {"point_id": ids, "block": blocks, "stratum": blocks, "units": 4},
        geometry=make_points(np.array(xs), np.zeros(len(xs))),
    )
    blk = pd.DataFrame(
        {"block": ["B1", "B2"], "stratum": ["B1", "B2"], "variety": ["x", "x"], "sampled_area_ha": [3.0, 1.0]}
    )
    return pts, blk


def _results(ids, values, units=np.nan, unit=""):
    return pd.DataFrame(
        {
            "round": 1,
            "date": "",
            "point_id": ids,
            "unit": unit,
            "value": values,
            "units_measured": units,
            "variable": "brix",
        }
    )


def test_grid_all_row_is_area_weighted_stratified_mean():
    pts, blk = _plan()
    y = np.array([20.0, 21.0, 22.0, 23.0, 18.0, 19.0, 17.0])
    tab = estimate_table(pts, blk, _results(pts["point_id"], y), value="brix").set_index("group")
    # reference: Cochran (1977) eqs. 5.1 and 5.7, blocks as strata, W_h from area
    w1, w2 = 0.75, 0.25
    mean = w1 * y[:4].mean() + w2 * y[4:].mean()
    var = w1**2 * y[:4].var(ddof=1) / 4 + w2**2 * y[4:].var(ddof=1) / 3
    assert tab.loc["all", "mean"] == pytest.approx(mean, abs=1e-12)
    assert tab.loc["all", "se"] == pytest.approx(var**0.5, abs=1e-12)


def test_clusters_composite_uses_units_in_ratio():
    pts, blk = _plan()
    y = np.array([20.0, 21.0, 22.0, 23.0, 18.0, 19.0, 17.0])
    m = np.array([4.0, 2.0, 4.0, 3.0, 4.0, 4.0, 1.0])
    res = _results(pts["point_id"], y, units=m)
    tab = estimate_table(pts, blk, res, value="brix", design="clusters").set_index("group")
    # reference: Cochran (1977) ch. 6 ratio estimate sum(y_i) / sum(m_i) with
    # y_i = composite mean x units measured, computed by hand here
    tot = y[:4] * m[:4]
    assert tab.loc["B1", "mean"] == pytest.approx(tot.sum() / m[:4].sum(), abs=1e-12)
    assert tab.loc["all", "n"] == 7


def test_clusters_per_plant_rows_give_icc():
    pts, blk = _plan((5, 5))
    rng = np.random.default_rng(3)
    ids = np.repeat(pts["point_id"].to_numpy(), 4)
    unit = np.tile(["1", "2", "3", "4"], len(pts))
    y = np.repeat(rng.normal(20, 2, len(pts)), 4) + rng.normal(0, 0.5, len(ids))
    res = _results(ids, y, unit=unit)
    tab = estimate_table(pts, blk, res, value="brix", design="clusters").set_index("group")
    # reference: Kish (1965) deff = 1 + (m - 1) rho > 1 for positively correlated plants;
    # here the between-cluster SD (2) dwarfs the within (0.5), so rho is near 0.94
    assert 0.8 < tab.loc["all", "icc"] < 1.0
    # reference: Cochran (1977) §6.10, separate ratio per block weighted by area (3 ha and 1 ha)
    assert tab.loc["all", "mean"] == pytest.approx(0.75 * y[:20].mean() + 0.25 * y[20:].mean(), abs=1e-12)
