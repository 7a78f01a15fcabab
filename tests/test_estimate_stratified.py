"""Stratified and per-block estimates against Cochran's formulas and samplics."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy import stats

from fieldplan.estimate.intervals import satterthwaite_df, t_interval
from fieldplan.estimate.stratified import ONE_POINT_NOTE, group_estimates, stratified_mean


def _data():
    rng = np.random.default_rng(20260302)
    n = {"A": 6, "B": 9, "C": 4}
    mu = {"A": 20.0, "B": 23.0, "C": 18.5}
    sd = {"A": 1.0, "B": 2.5, "C": 0.7}
    strata = np.concatenate([[h] * k for h, k in n.items()])
    y = np.concatenate([rng.normal(mu[h], sd[h], k) for h, k in n.items()])
    return y, strata, {"A": 120.0, "B": 300.0, "C": 40.0}


def _hand(y, strata, sizes, fpc):
    # reference: Cochran, Sampling Techniques 3rd ed. (1977), eqs. 5.1, 5.7, 5.16,
    # written out stratum by stratum as in the book.
    big_n = sum(sizes.values())
    mean = var = 0.0
    parts = []
    for h, nh_size in sizes.items():
        yh = y[strata == h]
        nh = len(yh)
        w = nh_size / big_n
        f = nh / nh_size if fpc else 0.0
        s2 = sum((v - sum(yh) / nh) ** 2 for v in yh) / (nh - 1)
        mean += w * sum(yh) / nh
        g = w * w * (1 - f) / nh
        var += g * s2
        parts.append((g * s2, nh))
    df = var**2 / sum(p**2 / (nh - 1) for p, nh in parts)
    return mean, var**0.5, df


@pytest.mark.parametrize("fpc", [False, True])
def test_stratified_matches_hand_computation(fpc):
    y, strata, sizes = _data()
    est = stratified_mean(y, strata, sizes=sizes, fpc=fpc)
    mean, se, df = _hand(y, strata, sizes, fpc)
    # reference: Cochran (1977) eqs. 5.1, 5.7 and Satterthwaite df eq. 5.16 (eq. numbers from memory)
    assert est.mean == pytest.approx(mean, abs=1e-9)
    assert est.se == pytest.approx(se, abs=1e-9)
    assert est.df == pytest.approx(df, abs=1e-9)
    q = stats.t.ppf(0.975, df)  # reference: scipy.stats.t quantile
    assert est.lower == pytest.approx(mean - q * se, abs=1e-9)
    assert est.upper == pytest.approx(mean + q * se, abs=1e-9)


def test_stratified_matches_samplics_taylor():
    samplics = pytest.importorskip("samplics")
    y, strata, sizes = _data()
    n_h = {h: int((strata == h).sum()) for h in sizes}
    w = np.array([sizes[h] / n_h[h] for h in strata])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = samplics.TaylorEstimator(samplics.PopParam.mean)
        # samplics takes the correction factor itself, 1 - n_h / N_h.
        ref.estimate(y=y, samp_weight=w, stratum=strata, fpc={h: 1 - n_h[h] / sizes[h] for h in sizes})
    est = stratified_mean(y, strata, sizes=sizes, fpc=True)
    # reference: samplics.TaylorEstimator (PyPI samplics 0.6), stratified design, weights N_h/n_h
    assert est.mean == pytest.approx(ref.point_est, abs=1e-9)
    assert est.se == pytest.approx(ref.stderror, abs=1e-9)
    # samplics uses n - H degrees of freedom; with the same df the bounds agree.
    lo, hi = t_interval(est.mean, est.se, ref.degree_of_freedom, confidence=0.95)
    assert float(lo) == pytest.approx(float(ref.lower_ci), abs=1e-9)
    assert float(hi) == pytest.approx(float(ref.upper_ci), abs=1e-9)


def test_group_estimates_t_interval_and_one_point_block():
    y = np.array([10.0, 12.0, 11.0, 13.0, 7.5])
    g = np.array(["B01", "B01", "B01", "B01", "B02"])
    tab = group_estimates(y, g, confidence=0.9).set_index("group")
    b1 = y[:4]
    # reference: scipy.stats.t.interval with n-1 df and s/sqrt(n) (Cochran 1977, eq. 2.16)
    lo, hi = stats.t.interval(0.9, 3, loc=b1.mean(), scale=stats.sem(b1))
    assert tab.loc["B01", "lower"] == pytest.approx(lo, abs=1e-12)
    assert tab.loc["B01", "upper"] == pytest.approx(hi, abs=1e-12)
    # A single point has no variance estimate: NaN, never a zero-width interval.
    assert tab.loc["B02", "mean"] == 7.5
    assert np.isnan(tab.loc["B02", "se"]) and np.isnan(tab.loc["B02", "lower"])
    assert tab.loc["B02", "note"] == ONE_POINT_NOTE


def test_stratified_one_point_stratum_gives_nan_se():
    y = np.array([1.0, 2.0, 3.0, 9.0])
    s = np.array(["a", "a", "a", "b"])
    est = stratified_mean(y, s, sizes={"a": 1.0, "b": 1.0})
    # reference: Cochran (1977) eq. 5.1 — mean still defined, variance needs n_h >= 2
    assert est.mean == pytest.approx(0.5 * 2.0 + 0.5 * 9.0)
    assert np.isnan(est.se) and "b" in est.note


def test_satterthwaite_equal_strata_gives_pooled_df():
    # reference: Cochran (1977) eq. 5.16 — equal terms and n_h give H (n - 1) df
    assert satterthwaite_df([1.0, 1.0, 1.0], [2.0, 2.0, 2.0], [5, 5, 5]) == pytest.approx(12.0)


def test_t_interval_matches_scipy():
    # reference: scipy.stats.t.interval
    lo, hi = stats.t.interval(0.8, 7, loc=3.0, scale=0.4)
    got = t_interval(3.0, 0.4, 7, confidence=0.8)
    assert float(got[0]) == pytest.approx(lo, abs=1e-12)
    assert float(got[1]) == pytest.approx(hi, abs=1e-12)


def test_stratified_interval_coverage_500_samples():
    rng = np.random.default_rng(11)
    mu = np.array([18.0, 22.0, 25.0])
    sd = np.array([1.5, 3.0, 2.0])
    size = {"a": 2.0, "b": 5.0, "c": 3.0}
    true = sum(size[h] * m for h, m in zip("abc", mu, strict=True)) / 10.0
    n = np.array([8, 12, 10])
    strata = np.repeat(list("abc"), n)
    hits = 0
    for _ in range(500):
        y = rng.normal(np.repeat(mu, n), np.repeat(sd, n))
        e = stratified_mean(y, strata, sizes=size)
        hits += e.lower <= true <= e.upper
    # reference: nominal 95% coverage of a t interval (Cochran 1977, §5.4); 500 draws
    # give a binomial SD of about 1%, hence the 92–98% band.
    assert 0.92 <= hits / 500 <= 0.98


def test_stratified_single_point_stratum_pooled_variance():
    y = np.array([1.0, 2.0, 3.0, 10.0, 14.0, 9.0])
    s = np.array(["a", "a", "a", "b", "b", "c"])
    est = stratified_mean(y, s, sizes={"a": 2.0, "b": 1.0, "c": 1.0}, single="pooled")
    # reference: Cochran (1977) eq. 5.7 with the pooled within-stratum variance
    # sum (n_h - 1) s_h^2 / sum (n_h - 1) standing in for the one-point stratum (§5A.12
    # discusses the problem; the pooled substitute is stated in the note)
    sp2 = (2 * 1.0 + 1 * 8.0) / 3
    var = 0.5**2 * 1.0 / 3 + 0.25**2 * 8.0 / 2 + 0.25**2 * sp2 / 1
    assert est.se == pytest.approx(var**0.5, abs=1e-12)
    assert "pooled" in est.note
