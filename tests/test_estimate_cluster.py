"""Ratio estimator over clusters, ICC and design effect against outside references."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from fieldplan.estimate.cluster import cluster_mean_from_units, icc_anova, ratio_mean
from fieldplan.estimate.nextplan import observed_variability


def _units(seed=5, k=12, sigma_b=1.0, sigma_w=2.0, sizes=None):
    rng = np.random.default_rng(seed)
    m = np.full(k, 6) if sizes is None else np.asarray(sizes)
    cl = np.repeat([f"C{i:02d}" for i in range(k)], m)
    y = 20 + np.repeat(rng.normal(0, sigma_b, k), m) + rng.normal(0, sigma_w, m.sum())
    return y, cl


def test_ratio_mean_matches_cochran_formula():
    y_tot = np.array([45.0, 60.5, 38.0, 71.2, 52.3])
    m = np.array([3.0, 4.0, 2.0, 5.0, 3.0])
    est = ratio_mean(y_tot, m, population_clusters=40)
    # reference: Cochran, Sampling Techniques 3rd ed. (1977), ch. 6 ratio estimate
    # R = y/x and v(R) = (1-f)/(n xbar^2) * sum (y_i - R x_i)^2 / (n-1), written out here.
    n, f = 5, 5 / 40
    r = sum(y_tot) / sum(m)
    v = (
        (1 - f)
        / (n * (sum(m) / n) ** 2)
        * sum((yi - r * mi) ** 2 for yi, mi in zip(y_tot, m, strict=True))
        / (n - 1)
    )
    assert est.mean == pytest.approx(r, abs=1e-12)
    assert est.se == pytest.approx(v**0.5, abs=1e-12)
    assert est.df == n - 1


def test_ratio_mean_matches_samplics():
    samplics = pytest.importorskip("samplics")
    y, cl = _units(sizes=[3, 5, 4, 6, 2, 5, 4, 3, 6, 5, 4, 4])
    d = pd.DataFrame({"y": y, "c": cl}).groupby("c")["y"].agg(["sum", "count"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = samplics.TaylorEstimator(samplics.PopParam.ratio)
        ref.estimate(y=d["sum"].to_numpy(), x=d["count"].to_numpy(dtype=float), psu=d.index.to_numpy())
    est = ratio_mean(d["sum"], d["count"])
    # reference: samplics.TaylorEstimator ratio (PyPI samplics 0.6), one PSU per cluster
    assert est.mean == pytest.approx(ref.point_est, abs=1e-9)
    assert est.se == pytest.approx(ref.stderror, abs=1e-9)


def test_icc_anova_matches_statsmodels_reml_on_balanced_data():
    sm = pytest.importorskip("statsmodels.formula.api")
    y, cl = _units(seed=8, k=15, sigma_b=1.5, sigma_w=1.0)
    rho = icc_anova(y, cl)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fit = sm.mixedlm("y ~ 1", pd.DataFrame({"y": y, "c": cl}), groups="c").fit(reml=True)
    sb2, sw2 = float(fit.cov_re.iloc[0, 0]), float(fit.scale)
    # reference: statsmodels MixedLM (REML); on balanced data with a positive
    # between-cluster component REML equals the ANOVA estimator (Searle, Casella &
    # McCulloch 1992, Variance Components, §4.7 — from memory).
    assert rho == pytest.approx(sb2 / (sb2 + sw2), abs=1e-4)


def test_icc_anova_hand_computation_unequal_sizes():
    y = np.array([1.0, 2.0, 3.0, 5.0, 6.0, 9.0, 10.0, 11.0, 12.0])
    cl = np.array(["a", "a", "a", "b", "b", "c", "c", "c", "c"])
    # reference: one-way ANOVA ICC with m0 = (N - sum m_i^2/N)/(k-1) (Donner 1986,
    # Int. Stat. Rev. 54:67-82), computed by hand below.
    groups = {"a": [1, 2, 3], "b": [5, 6], "c": [9, 10, 11, 12]}
    big_n, k = 9, 3
    gm = sum(y) / big_n
    msb = sum(len(v) * (np.mean(v) - gm) ** 2 for v in groups.values()) / (k - 1)
    msw = sum(sum((x - np.mean(v)) ** 2 for x in v) for v in groups.values()) / (big_n - k)
    m0 = (big_n - sum(len(v) ** 2 for v in groups.values()) / big_n) / (k - 1)
    assert icc_anova(y, cl) == pytest.approx((msb - msw) / (msb + (m0 - 1) * msw), abs=1e-12)


def test_design_effect_kish_and_observed():
    y, cl = _units(seed=3, k=30, sigma_b=1.0, sigma_w=1.0)
    est = cluster_mean_from_units(y, cl)
    # reference: Kish (1965), Survey Sampling, deff = 1 + (m - 1) rho
    assert est.deff_kish == pytest.approx(1 + (6 - 1) * est.icc, abs=1e-12)
    # with rho near 0.5 and m = 6 both design effects are well above 1
    assert est.deff > 1.5 and est.deff_kish > 1.5


def test_cluster_interval_coverage_500_samples():
    rng = np.random.default_rng(17)
    hits = 0
    k, m = 20, 5
    cl = np.repeat(np.arange(k).astype(str), m)
    for _ in range(500):
        y = 20 + np.repeat(rng.normal(0, 1, k), m) + rng.normal(0, 1, k * m)
        e = cluster_mean_from_units(y, cl)
        hits += e.lower <= 20.0 <= e.upper
    # reference: nominal 95% t coverage (Cochran 1977, ch. 9); binomial band for 500 draws
    assert 0.92 <= hits / 500 <= 0.98


def test_observed_variability_pooled_sd():
    y = np.array([1.0, 3.0, 10.0, 14.0])
    g = np.array(["a", "a", "b", "b"])
    v = observed_variability(y, groups=g)
    # reference: pooled variance sum (n_h - 1) s_h^2 / sum (n_h - 1) (Cochran 1977, §5.9)
    assert v.sd == pytest.approx(np.sqrt((2.0 + 8.0) / 2.0))
    assert v.cv == pytest.approx(v.sd / 7.0)
