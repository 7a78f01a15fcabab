"""Cluster (two-stage) estimates: ratio mean, intra-cluster correlation, design effect.

When each sampled point is a cluster of ``m_i`` plants (a run of vines, a
group of trees), the mean per plant is the ratio estimator

    ``ȳ = Σ y_i / Σ m_i``

with ``y_i`` the cluster total. Its linearised (Taylor) variance treats the
clusters as the sampling units (Cochran 1977, *Sampling Techniques* 3rd ed.,
ch. 6 ratio estimator and ch. 9 clusters of unequal size):

    ``v(ȳ) = (1 − f) / (n m̄²) · Σ (y_i − ȳ m_i)² / (n − 1)``,

``m̄ = Σ m_i / n``, ``n − 1`` degrees of freedom.

Over several blocks (strata), the separate ratio estimator combines one ratio
per stratum with the strata's weights (Cochran 1977, §6.10-6.11 and ch. 5):

    ``ȳ_rs = Σ W_h r_h``, ``v(ȳ_rs) = Σ W_h² v(r_h)``,

with Satterthwaite degrees of freedom (Cochran §5.4). Clusters of different
blocks are never pooled into one ratio, so a block sampled more heavily than
its share of the area does not pull the mean toward itself.

With one value per plant the intra-cluster correlation comes from the one-way
ANOVA estimator with the unequal-size correction ``m₀`` (e.g. Donner 1986,
Int. Stat. Rev. 54:67–82), and the design effect is reported both as observed
(cluster variance over the simple-random-sampling variance of the same number
of plants) and as Kish's ``1 + (m̄ − 1) ρ`` (Kish 1965, *Survey Sampling*).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from fieldplan.errors import InputError
from fieldplan.estimate.intervals import check_confidence, satterthwaite_df, t_interval

__all__ = [
    "ClusterEstimate",
    "ratio_mean",
    "stratified_ratio_mean",
    "cluster_mean_from_units",
    "icc_anova",
]


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
    strata: pd.DataFrame | None = field(default=None, repr=False)


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


def icc_anova(values: ArrayLike, clusters: ArrayLike, strata: ArrayLike | None = None) -> float:
    """One-way ANOVA estimator of the intra-cluster correlation.

    ``ρ = (MSB − MSW) / (MSB + (m₀ − 1) MSW)`` with
    ``m₀ = (N − Σ m_i² / N) / (k − 1)``. The estimate can be negative
    (clusters less alike than random pairs); it is returned as is.
    Returns NaN with fewer than two clusters or no within-cluster replication.

    With ``strata`` (block of each value) clusters are compared with their own
    stratum's mean, so differences between blocks do not count as likeness
    within clusters: ``MSB = Σ_h Σ_i m_i (ȳ_i − ȳ_h)² / (k − H)`` and
    ``m₀ = (N − Σ_h Σ_i m_i² / N_h) / (k − H)`` (the nested one-way layout).
    """
    y = np.asarray(values, dtype=float)
    g = np.asarray(clusters, dtype=object)
    keep = np.isfinite(y)
    h = np.zeros(y.shape, dtype=object) if strata is None else np.asarray(strata, dtype=object)
    d = pd.DataFrame({"h": h[keep].astype(str), "g": g[keep].astype(str), "y": y[keep]})
    agg = d.groupby(["h", "g"])["y"].agg(["count", "mean"]).reset_index()
    k = len(agg)
    n_strata = agg["h"].nunique()
    big_n = float(agg["count"].sum())
    if k - n_strata < 1 or big_n - k < 1:
        return float("nan")
    m = agg["count"].to_numpy(dtype=float)
    stratum_n = agg.groupby("h")["count"].transform("sum").to_numpy(dtype=float)
    stratum_mean = d.groupby("h")["y"].mean()
    gm = agg["h"].map(stratum_mean).to_numpy()
    msb = np.sum(m * (agg["mean"].to_numpy() - gm) ** 2) / (k - n_strata)
    cluster_mean = agg.set_index(["h", "g"])["mean"]
    within = d["y"].to_numpy() - cluster_mean.reindex(pd.MultiIndex.from_frame(d[["h", "g"]])).to_numpy()
    msw = np.sum(within**2) / (big_n - k)
    m0 = (big_n - np.sum(m**2 / stratum_n)) / (k - n_strata)
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


def stratified_ratio_mean(
    totals: ArrayLike,
    sizes: ArrayLike,
    strata: ArrayLike,
    *,
    weights: Mapping[str, float],
    single: str = "pooled",
    confidence: float = 0.95,
) -> ClusterEstimate:
    """Separate ratio estimator over strata: ``Σ W_h r_h`` with ``r_h = Σ y_hi / Σ m_hi``.

    Parameters
    ----------
    totals, sizes : array_like of float
        Cluster totals ``y_hi`` and units measured ``m_hi`` (> 0), one per cluster.
    strata : array_like
        Stratum (block) of each cluster.
    weights : mapping, keyword-only
        Stratum size (area or plant count) for every sampled stratum; the
        weights are ``W_h = N_h / Σ N_h`` over the sampled strata.
    single : {"pooled", "nan"}, keyword-only
        A stratum with one cluster has no variance of its own: ``"pooled"``
        gives it the pooled per-unit residual variance of the others (stated in
        the note), ``"nan"`` leaves the standard error undefined.
    confidence : float, keyword-only

    Returns
    -------
    ClusterEstimate
        ``strata`` holds per stratum ``group, n, units, ratio, se, weight``.

    Notes
    -----
    Cochran (1977) §6.10-6.11: ``v(r_h) = Σ (y_hi − r_h m_hi)² / ((n_h − 1) n_h m̄_h²)``
    (the same linearised variance as :func:`ratio_mean`), combined as in eq. 5.7
    with ``a_h = W_h² / n_h`` and per-unit residual variances
    ``q_h = Σ e_hi² / ((n_h − 1) m̄_h²)``; degrees of freedom by Satterthwaite.
    """
    c = check_confidence(confidence)
    y = np.asarray(totals, dtype=float)
    m = np.asarray(sizes, dtype=float)
    h = np.asarray(strata, dtype=object)
    if not (y.shape == m.shape == h.shape) or y.ndim != 1:
        raise InputError("cluster totals, sizes and strata must be 1-D arrays of equal length")
    keep = np.isfinite(y) & np.isfinite(m)
    d = pd.DataFrame({"h": h[keep].astype(str), "y": y[keep], "m": m[keep]})
    if d.empty:
        raise InputError("no clusters with numeric values to estimate from")
    if (d["m"] <= 0).any():
        raise InputError("every cluster must have at least one unit measured (units > 0)")
    if single not in ("nan", "pooled"):
        raise InputError(f"single must be 'nan' or 'pooled', got {single!r}")
    agg = d.groupby("h", sort=True).agg(n=("y", "size"), ysum=("y", "sum"), msum=("m", "sum"))
    missing = [g for g in agg.index if g not in weights]
    if missing:
        raise InputError(f"stratum sizes missing for {', '.join(missing)}; give an area for every block")
    size = np.array([float(weights[g]) for g in agg.index])
    if np.any(~np.isfinite(size)) or np.any(size <= 0):
        raise InputError("stratum sizes must be positive numbers (area or plant count)")
    w = size / size.sum()
    n = agg["n"].to_numpy(dtype=float)
    r = (agg["ysum"] / agg["msum"]).to_numpy()
    mbar = agg["msum"].to_numpy() / n
    resid = d["y"].to_numpy() - d["h"].map(agg["ysum"] / agg["msum"]).to_numpy() * d["m"].to_numpy()
    ss = pd.Series(resid**2).groupby(d["h"].to_numpy()).sum().reindex(agg.index).to_numpy()
    dof = n - 1.0
    with np.errstate(divide="ignore", invalid="ignore"):
        q = np.where(n >= 2, ss / np.where(n >= 2, dof, 1.0) / mbar**2, np.nan)
    one = list(agg.index[n < 2])
    note = ""
    if one and single == "pooled" and dof[n >= 2].sum() >= 1:
        pooled_df = float(dof[n >= 2].sum())
        q = np.where(n >= 2, q, np.nansum(np.where(n >= 2, dof * q, 0.0)) / pooled_df)
        dof = np.where(n >= 2, dof, pooled_df)
        note = f"block {', '.join(one)} has 1 cluster: pooled within-block variance used for it"
    elif one:
        note = f"no interval: block {', '.join(one)} has 1 cluster"
    a = w**2 / n
    mean = float(np.sum(w * r))
    if np.all(np.isfinite(q)):
        se = float(np.sqrt(np.sum(a * q)))
        df = satterthwaite_df(a, q, dof + 1.0)
    else:
        se, df = float("nan"), float("nan")
    lo, hi = t_interval(mean, se, df, confidence=c)
    table = pd.DataFrame(
        {
            "group": agg.index.to_numpy(dtype=object),
            "n": n.astype(int),
            "units": agg["msum"].to_numpy(),
            "ratio": r,
            "se": np.sqrt(q / n),
            "weight": w,
        }
    )
    return ClusterEstimate(
        mean,
        se,
        df,
        float(lo),
        float(hi),
        int(n.sum()),
        int(round(float(agg["msum"].sum()))),
        c,
        mean_cluster_size=float(agg["msum"].sum() / n.sum()),
        note=note,
        strata=table,
    )
