"""Per-group and stratified estimates of a mean.

Formulas follow Cochran (1977), *Sampling Techniques* 3rd ed., chapter 5:

* stratum mean ``ȳ_h``, variance ``s_h²`` with ``n_h − 1`` divisor;
* ``ȳ_st = Σ W_h ȳ_h`` with ``W_h = N_h / N`` (eq. 5.1);
* ``v(ȳ_st) = Σ W_h² (1 − f_h) s_h² / n_h`` (eq. 5.7 with sample variances);
* effective degrees of freedom by Satterthwaite (§5.4, eq. 5.16).

Stratum sizes ``N_h`` may be areas or plant counts. When they are counts of
sampling units, ``fpc=True`` applies the finite population correction
``f_h = n_h / N_h``; for points in a continuous area the population of possible
points is infinite and ``f_h = 0``.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from fieldplan.errors import InputError
from fieldplan.estimate.intervals import check_confidence, satterthwaite_df, t_interval

__all__ = ["StratifiedEstimate", "group_estimates", "stratified_mean", "ONE_POINT_NOTE"]

ONE_POINT_NOTE = "no interval (1 point)"

GROUP_COLUMNS = ["group", "n", "mean", "sd", "se", "df", "lower", "upper", "note"]


def _clean(values: ArrayLike, groups: ArrayLike) -> pd.DataFrame:
    y = np.asarray(values, dtype=float)
    g = np.asarray(groups, dtype=object)
    if y.shape != g.shape or y.ndim != 1:
        raise InputError(f"values and groups must be 1-D and of equal length, got {y.shape} and {g.shape}")
    keep = np.isfinite(y)
    return pd.DataFrame({"group": g[keep].astype(str), "y": y[keep]})


def group_estimates(
    values: ArrayLike,
    groups: ArrayLike,
    *,
    population: Mapping[str, float] | None = None,
    confidence: float = 0.95,
) -> pd.DataFrame:
    """Mean, standard error and t interval for each group (block, stratum...).

    Each group is treated as a simple random sample of its points (Cochran
    1977, eqs. 2.12 and 2.16); the interval uses ``n − 1`` degrees of freedom.
    NaN values are ignored.

    Parameters
    ----------
    values : array_like of float
        One value per point.
    groups : array_like
        Group label of each point.
    population : mapping, optional, keyword-only
        Number of sampling units ``N`` per group, for the finite population
        correction ``1 − n/N``. Omit for points in a continuous area.
    confidence : float, keyword-only
        Two-sided confidence level.

    Returns
    -------
    pandas.DataFrame
        Columns ``group, n, mean, sd, se, df, lower, upper, note``, one row per
        group in sorted order. A group with one point has NaN ``sd``, ``se``
        and bounds and the note ``"no interval (1 point)"``.
    """
    c = check_confidence(confidence)
    d = _clean(values, groups)
    if d.empty:
        return pd.DataFrame(columns=GROUP_COLUMNS)
    agg = d.groupby("group", sort=True)["y"].agg(["count", "mean", "var"])
    n = agg["count"].to_numpy(dtype=float)
    sd = np.sqrt(agg["var"].to_numpy(dtype=float))
    fpc = np.ones_like(n)
    if population is not None:
        big_n = np.array([float(population.get(k, np.inf)) for k in agg.index])
        fpc = np.where(np.isfinite(big_n) & (big_n > 0), 1.0 - n / big_n, 1.0)
        fpc = np.clip(fpc, 0.0, 1.0)
    se = np.where(n >= 2, sd * np.sqrt(fpc / n), np.nan)
    df = np.where(n >= 2, n - 1.0, np.nan)
    lower, upper = t_interval(agg["mean"].to_numpy(), se, df, confidence=c)
    note = np.where(n >= 2, "", ONE_POINT_NOTE)
    return pd.DataFrame(
        {
            "group": agg.index.to_numpy(dtype=object),
            "n": n.astype(int),
            "mean": agg["mean"].to_numpy(dtype=float),
            "sd": np.where(n >= 2, sd, np.nan),
            "se": se,
            "df": df,
            "lower": lower,
            "upper": upper,
            "note": note,
        }
    )


@dataclass(frozen=True)
class StratifiedEstimate:
    """Stratified estimate of a mean and its interval.

    Attributes
    ----------
    mean, se, df, lower, upper : float
        Estimate, standard error, Satterthwaite degrees of freedom and bounds.
    n : int
        Number of values used.
    confidence : float
    strata : pandas.DataFrame
        Per-stratum ``group, n, mean, sd, se, df, lower, upper, note`` plus
        ``size`` (``N_h``) and ``weight`` (``W_h``).
    note : str
        Why the interval is missing, if it is.
    """

    mean: float
    se: float
    df: float
    lower: float
    upper: float
    n: int
    confidence: float
    strata: pd.DataFrame = field(repr=False)
    note: str = ""


def stratified_mean(
    values: ArrayLike,
    strata: ArrayLike,
    *,
    sizes: Mapping[str, float],
    fpc: bool = False,
    single: str = "nan",
    confidence: float = 0.95,
) -> StratifiedEstimate:
    """Stratified mean ``Σ W_h ȳ_h`` with its standard error and t interval.

    Parameters
    ----------
    values : array_like of float
        One value per point (NaN values are ignored).
    strata : array_like
        Stratum label of each point.
    sizes : mapping, keyword-only
        Stratum size ``N_h`` for every stratum that was sampled: area or plant
        count. Weights are ``W_h = N_h / Σ N_h`` over the sampled strata.
    fpc : bool, keyword-only
        ``True`` when ``sizes`` count sampling units, to apply ``1 − n_h/N_h``.
    single : {"nan", "pooled"}, keyword-only
        What to do with a stratum holding one point. ``"nan"`` (default) leaves
        the overall standard error undefined. ``"pooled"`` gives that stratum
        the pooled within-stratum variance of the others
        (``Σ (n_h − 1) s_h² / Σ (n_h − 1)``), an assumption the ``note`` states;
        its degrees of freedom in the Satterthwaite sum are the pooled ones.
    confidence : float, keyword-only

    Returns
    -------
    StratifiedEstimate

    Notes
    -----
    A stratum with a single point has no variance estimate; the overall
    standard error is then NaN and ``note`` names the strata concerned
    (Cochran 1977, §5A.12 discusses collapsing such strata, which is left to
    the user because it needs judgement about which strata are alike).
    """
    c = check_confidence(confidence)
    per = group_estimates(values, strata, confidence=c)
    if per.empty:
        raise InputError("no numeric values to estimate from: every value is missing")
    missing = [g for g in per["group"] if g not in sizes]
    if missing:
        raise InputError(
            f"stratum sizes missing for {', '.join(map(str, missing))}; "
            "give an area or plant count for every sampled stratum"
        )
    size = np.array([float(sizes[g]) for g in per["group"]])
    if np.any(~np.isfinite(size)) or np.any(size <= 0):
        raise InputError("stratum sizes must be positive numbers (area or plant count)")
    w = size / size.sum()
    n = per["n"].to_numpy(dtype=float)
    f = np.clip(n / size, 0.0, 1.0) if fpc else np.zeros_like(n)
    s2 = per["sd"].to_numpy(dtype=float) ** 2
    a = w**2 * (1.0 - f) / n
    mean = float(np.sum(w * per["mean"].to_numpy()))
    one = per.loc[n < 2, "group"].tolist()
    names = ", ".join(map(str, one))
    dof = n - 1.0
    if single not in ("nan", "pooled"):
        raise InputError(f"single must be 'nan' or 'pooled', got {single!r}")
    if one and single == "pooled" and np.sum(dof[n >= 2]) >= 1:
        pooled_df = float(np.sum(dof[n >= 2]))
        s2 = np.where(n >= 2, s2, np.nansum(np.where(n >= 2, dof * s2, 0.0)) / pooled_df)
        dof = np.where(n >= 2, dof, pooled_df)
        note = f"stratum {names} has 1 point: pooled within-stratum variance used for it"
    elif one:
        note = f"no interval: stratum {names} has 1 point"
    else:
        note = ""
    if one and single == "nan" or not np.all(np.isfinite(s2)):
        se, df = float("nan"), float("nan")
    else:
        se = float(np.sqrt(np.sum(a * s2)))
        df = satterthwaite_df(a, s2, dof + 1.0)
    lo, hi = t_interval(mean, se, df, confidence=c)
    table = per.assign(size=size, weight=w)
    if fpc:
        # Per-stratum intervals must carry the same correction as the total.
        se_h = np.where(n >= 2, np.sqrt(s2 * (1.0 - f) / n), np.nan)
        lo_h, hi_h = t_interval(table["mean"], se_h, table["df"], confidence=c)
        table = table.assign(se=se_h, lower=lo_h, upper=hi_h)
    return StratifiedEstimate(
        mean=mean,
        se=se,
        df=df,
        lower=float(lo),
        upper=float(hi),
        n=int(n.sum()),
        confidence=c,
        strata=table,
        note=note,
    )
