"""Combined cluster estimates: blocks as strata weighted by area, one ratio per block."""

from __future__ import annotations

import warnings

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from shapely import points as make_points

from fieldplan.estimate.cluster import ratio_mean, stratified_ratio_mean
from fieldplan.estimate.table import estimate_table

# Blocks of unequal area and unequal sampling effort: B1 is sampled far more
# heavily than its share of the area, so pooling its clusters biases the mean.
AREAS = {"B1": 1.0, "B2": 4.0, "B3": 2.5}
CLUSTERS = {"B1": 12, "B2": 4, "B3": 6}
VARIETY = {"B1": "shiraz", "B2": "shiraz", "B3": "riesling"}
LEVEL = {"B1": 26.0, "B2": 20.0, "B3": 22.0}


def _plan():
    ids, blocks = [], []
    for b, k in CLUSTERS.items():
        ids += [f"{b}-{i + 1:03d}" for i in range(k)]
        blocks += [b] * k
    pts = gpd.GeoDataFrame(
        {"point_id": ids, "block": blocks, "stratum": blocks, "units": 4},
        geometry=make_points(np.arange(len(ids), dtype=float), np.zeros(len(ids))),
    )
    blk = pd.DataFrame(
        {
            "block": list(AREAS),
            "stratum": list(AREAS),
            "variety": [VARIETY[b] for b in AREAS],
            "sampled_area_ha": list(AREAS.values()),
        }
    )
    return pts, blk


def _per_plant(pts, sizes, seed=11):
    """One row per plant: ``sizes`` plants at each cluster."""
    rng = np.random.default_rng(seed)
    ids = np.repeat(pts["point_id"].to_numpy(), sizes)
    block = np.repeat(pts["block"].to_numpy(), sizes)
    unit = np.concatenate([np.arange(1, k + 1).astype(str) for k in sizes])
    cluster_effect = np.repeat(rng.normal(0, 1.5, len(pts)), sizes)
    y = np.array([LEVEL[b] for b in block]) + cluster_effect + rng.normal(0, 0.8, len(ids))
    res = pd.DataFrame(
        {"round": 1, "date": "", "point_id": ids, "unit": unit, "value": y, "units_measured": np.nan,
         "variable": "brix"}
    )  # fmt: skip
    return res, block


def _samplics_stratified(y, block, psu, weight):
    samplics = pytest.importorskip("samplics")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = samplics.TaylorEstimator(samplics.PopParam.mean)
        ref.estimate(y=y, samp_weight=weight, stratum=block, psu=psu)
    return float(ref.point_est), float(ref.stderror)


def _weights(block, sizes_by_block, areas):
    """Plant weights W_h / M_h: each block's plants share its area weight."""
    total = sum(areas.values())
    return np.array([areas[b] / total / sizes_by_block[b] for b in block])


def test_all_row_matches_samplics_stratified_taylor():
    pts, blk = _plan()
    # Equal plants per cluster within a block (the plan's plants per cluster), different between blocks.
    per_block = {"B1": 3, "B2": 5, "B3": 4}
    sizes = np.array([per_block[b] for b in pts["block"]])
    res, block = _per_plant(pts, sizes)
    tab = estimate_table(pts, blk, res, value="brix", design="clusters").set_index("group")
    plants = pd.Series(block).value_counts().to_dict()
    mean, se = _samplics_stratified(res["value"].to_numpy(), block, res["point_id"].to_numpy(),
                                    _weights(block, plants, AREAS))
    # reference: samplics.TaylorEstimator (PyPI samplics 0.6), stratified design with one stratum
    # per block, clusters as PSUs, plant weights W_h / M_h so each block counts by its area
    assert tab.loc["all", "mean"] == pytest.approx(mean, abs=1e-9)
    assert tab.loc["all", "se"] == pytest.approx(se, rel=1e-9)
    assert "separate ratio" in tab.loc["all", "estimator"] and "area weights" in tab.loc["all", "estimator"]
    # The pooled ratio (every plant alike) is pulled toward the heavily sampled B1.
    pooled = res["value"].mean()
    assert abs(pooled - tab.loc["all", "mean"]) > 0.5


def test_by_variety_matches_samplics_per_variety():
    pts, blk = _plan()
    per_block = {"B1": 3, "B2": 5, "B3": 4}
    sizes = np.array([per_block[b] for b in pts["block"]])
    res, block = _per_plant(pts, sizes, seed=5)
    tab = estimate_table(pts, blk, res, value="brix", design="clusters", by="variety").set_index("group")
    keep = np.isin(block, ["B1", "B2"])
    sub = res[keep]
    plants = pd.Series(block[keep]).value_counts().to_dict()
    mean, se = _samplics_stratified(sub["value"].to_numpy(), block[keep], sub["point_id"].to_numpy(),
                                    _weights(block[keep], plants, {"B1": 1.0, "B2": 4.0}))
    # reference: samplics.TaylorEstimator (PyPI samplics 0.6), as above on the shiraz blocks only
    assert tab.loc["shiraz", "mean"] == pytest.approx(mean, abs=1e-9)
    assert tab.loc["shiraz", "se"] == pytest.approx(se, rel=1e-9)
    # riesling is one block: the plain ratio estimator
    assert tab.loc["riesling", "estimator"].startswith("ratio over clusters")


def test_unequal_clusters_combine_per_block_samplics_ratios():
    samplics = pytest.importorskip("samplics")
    pts, blk = _plan()
    rng = np.random.default_rng(2)
    sizes = rng.integers(2, 7, len(pts))
    res, block = _per_plant(pts, sizes, seed=9)
    tab = estimate_table(pts, blk, res, value="brix", design="clusters").set_index("group")
    total = sum(AREAS.values())
    mean = var = 0.0
    for b, area in AREAS.items():
        d = res[block == b].groupby("point_id")["value"].agg(["sum", "count"])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ref = samplics.TaylorEstimator(samplics.PopParam.ratio)
            ref.estimate(y=d["sum"].to_numpy(), x=d["count"].to_numpy(dtype=float), psu=d.index.to_numpy())
        # reference: samplics ratio per block; Cochran (1977) eqs. 5.1 and 5.7 combine them
        mean += area / total * float(ref.point_est)
        var += (area / total) ** 2 * float(ref.stderror) ** 2
    assert tab.loc["all", "mean"] == pytest.approx(mean, abs=1e-9)
    assert tab.loc["all", "se"] == pytest.approx(var**0.5, rel=1e-9)


def test_composite_samples_use_units_measured_within_each_block():
    pts, blk = _plan()
    rng = np.random.default_rng(4)
    y = rng.normal(22, 1.5, len(pts))
    m = rng.integers(1, 6, len(pts)).astype(float)
    res = pd.DataFrame({"round": 1, "date": "", "point_id": pts["point_id"], "unit": "", "value": y,
                        "units_measured": m, "variable": "brix"})  # fmt: skip
    tab = estimate_table(pts, blk, res, value="brix", design="clusters").set_index("group")
    block = pts["block"].to_numpy()
    total = sum(AREAS.values())
    # reference: Cochran (1977) §6.10, separate ratio estimate sum_h W_h (sum y_hi m_hi / sum m_hi)
    expect = sum(AREAS[b] / total * (y * m)[block == b].sum() / m[block == b].sum() for b in AREAS)
    assert tab.loc["all", "mean"] == pytest.approx(expect, abs=1e-12)
    direct = stratified_ratio_mean(y * m, m, block, weights=AREAS)
    assert direct.mean == pytest.approx(expect, abs=1e-12)


def test_one_cluster_in_a_block_borrows_pooled_variance():
    y = np.array([10.0, 12.0, 11.0, 30.0])
    m = np.array([2.0, 2.0, 2.0, 2.0])
    h = np.array(["a", "a", "a", "b"])
    e = stratified_ratio_mean(y, m, h, weights={"a": 1.0, "b": 1.0})
    single = ratio_mean(y[:3], m[:3])
    # reference: Cochran (1977) §5A.12 (from memory): a one-unit stratum has no variance of its own;
    # here it borrows stratum a's per-unit residual variance, stated in the note
    q = single.se**2 * 3
    assert e.se == pytest.approx(np.sqrt(0.25 * q / 3 + 0.25 * q / 1), rel=1e-12)
    assert "1 cluster" in e.note
    nan = stratified_ratio_mean(y, m, h, weights={"a": 1.0, "b": 1.0}, single="nan")
    assert np.isnan(nan.se) and np.isnan(nan.lower)
