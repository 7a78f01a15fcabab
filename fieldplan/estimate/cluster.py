"""Cluster (two-stage) estimates: ratio mean, intra-cluster correlation, design effect.

When each sampled point is a cluster of ``m_i`` plants (a run of vines, a
group of trees), the mean per plant is the ratio estimator

    ``ȳ = Σ y_i / Σ m_i``

with ``y_i`` the cluster total. Its linearised (Taylor) variance treats the
clusters as the sampling units (Cochran 1977, *Sampling Techniques* 3rd ed.,
ch. 6 ratio estimator and ch. 9 clusters of unequal size):

    ``v(ȳ) = (1 − f) / (n m̄²) · Σ (y_i − ȳ m_i)² / (n − 1)``,

``m̄ = Σ m_i / n``, ``n − 1`` degrees of freedom.

With one value per plant the intra-cluster correlation comes from the one-way
ANOVA estimator with the unequal-size correction ``m₀`` (e.g. Donner 1986,
Int. Stat. Rev. 54:67–82), and the design effect is reported both as observed
(cluster variance over the simple-random-sampling variance of the same number
of plants) and as Kish's ``1 + (m̄ − 1) ρ`` (Kish 1965, *Survey Sampling*).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from fieldplan.errors import InputError
from fieldplan.estimate.intervals import check_confidence, t_interval

__all__ = ["ClusterEstimate", "ratio_mean", "cluster_mean_from_units", "icc_anova"]


@dataclass(frozen=True)
class ClusterEstimate:
    """Ratio estimate of the mean per unit over clusters.

    ``icc``, ``deff`` and ``deff_kish`` are NaN unless per-unit values were
    given (:func:`cluster_mean_from_units`).
    """

    mean: float
    se: float
    df: float
    lower: float
    upper: float
    n_clusters: int
    n_units: int
    confidence: float
    icc: float = float("nan")
    deff: float = float("nan")
    deff_kish: float = float("nan")
    mean_cluster_size: float = float("nan")
    note: str = ""


def ratio_mean(
    totals: ArrayLike,
    sizes: ArrayLike,
    *,
    population_clusters: float | None = None,
    confidence: float = 0.95,
) -> ClusterEstimate:
    """Mean per unit ``Σ y_i / Σ m_i`` over sampled clusters.

    Parameters
    ----------
    totals : array_like of float
        Cluster totals ``y_i`` (cluster mean × units measured for a composite
        sample).
    sizes : array_like of float
        Units measured in each cluster ``m_i`` (> 0).
    population_clusters : float, optional, keyword-only
        Number of clusters ``N`` that could have been drawn, for ``f = n/N``.
    confidence : float, keyword-only

    Returns
    -------
    ClusterEstimate
    """
    c = check_confidence(confidence)
    y = np.asarray(totals, dtype=float)
    m = np.asarray(sizes, dtype=float)
    if y.shape != m.shape or y.ndim != 1:
        raise InputError("cluster totals and sizes must be 1-D arrays of equal length")
    keep = np.isfinite(y) & np.isfinite(m)
    y, m = y[keep], m[keep]
    if np.any(m <= 0):
        raise InputError("every cluster must have at least one unit measured (units > 0)")
    n = y.size
    if n == 0:
        raise InputError("no clusters with numeric values to estimate from")
    r = float(y.sum() / m.sum())
    if n < 2:
        lo, hi = np.nan, np.nan
        return ClusterEstimate(r, np.nan, np.nan, lo, hi, n, int(m.sum()), c, note="no interval (1 cluster)")
    f = 0.0 if population_clusters is None else min(1.0, n / float(population_clusters))
    mbar = m.mean()
    resid = y - r * m
    v = (1.0 - f) / (n * mbar**2) * np.sum(resid**2) / (n - 1.0)
    se = float(np.sqrt(v))
    df = float(n - 1)
    lo, hi = t_interval(r, se, df, confidence=c)
    return ClusterEstimate(r, se, df, float(lo), float(hi), n, int(m.sum()), c, mean_cluster_size=float(mbar))


def icc_anova(values: ArrayLike, clusters: ArrayLike) -> float:
    """One-way ANOVA estimator of the intra-cluster correlation.

    ``ρ = (MSB − MSW) / (MSB + (m₀ − 1) MSW)`` with
    ``m₀ = (N − Σ m_i² / N) / (k − 1)``. The estimate can be negative
    (clusters less alike than random pairs); it is returned as is.
    Returns NaN with fewer than two clusters or no within-cluster replication.
    """
    y = np.asarray(values, dtype=float)
    g = np.asarray(clusters, dtype=object)
    keep = np.isfinite(y)
    d = pd.DataFrame({"g": g[keep].astype(str), "y": y[keep]})
    agg = d.groupby("g")["y"].agg(["count", "mean"])
    k = len(agg)
    big_n = float(agg["count"].sum())
    if k < 2 or big_n - k < 1:
        return float("nan")
    m = agg["count"].to_numpy(dtype=float)
    gm = d["y"].mean()
    msb = np.sum(m * (agg["mean"].to_numpy() - gm) ** 2) / (k - 1)
    within = d["y"].to_numpy() - d["g"].map(agg["mean"]).to_numpy()
    msw = np.sum(within**2) / (big_n - k)
    m0 = (big_n - np.sum(m**2) / big_n) / (k - 1)
    den = msb + (m0 - 1.0) * msw
    if den == 0.0:
        return float("nan")
    return float((msb - msw) / den)


def cluster_mean_from_units(
    values: ArrayLike,
    clusters: ArrayLike,
    *,
    population_clusters: float | None = None,
    confidence: float = 0.95,
) -> ClusterEstimate:
    """Ratio estimate from one value per unit (plant), with ICC and design effect.

    Parameters
    ----------
    values : array_like of float
        One value per measured unit.
    clusters : array_like
        Cluster (point) label of each unit.
    population_clusters : float, optional, keyword-only
    confidence : float, keyword-only
    """
    y = np.asarray(values, dtype=float)
    g = np.asarray(clusters, dtype=object)
    keep = np.isfinite(y)
    d = pd.DataFrame({"g": g[keep].astype(str), "y": y[keep]})
    agg = d.groupby("g")["y"].agg(["sum", "count"])
    est = ratio_mean(
        agg["sum"].to_numpy(),
        agg["count"].to_numpy(dtype=float),
        population_clusters=population_clusters,
        confidence=confidence,
    )
    rho = icc_anova(d["y"], d["g"])
    n_units = len(d)
    s2 = float(d["y"].var(ddof=1)) if n_units > 1 else np.nan
    v_srs = s2 / n_units if n_units > 1 else np.nan
    deff = est.se**2 / v_srs if np.isfinite(v_srs) and v_srs > 0 else np.nan
    mbar = n_units / max(len(agg), 1)
    kish = 1.0 + (mbar - 1.0) * rho if np.isfinite(rho) else np.nan
    return ClusterEstimate(
        est.mean,
        est.se,
        est.df,
        est.lower,
        est.upper,
        est.n_clusters,
        est.n_units,
        est.confidence,
        icc=rho,
        deff=float(deff),
        deff_kish=float(kish),
        mean_cluster_size=float(mbar),
        note=est.note,
    )
