"""Observed variability of a finished round, for sizing the next one.

The sample-size calculation needs a standard deviation (or coefficient of
variation) and, for cluster designs, the intra-cluster correlation. Both are
read off the last round's results here so the next plan is sized from data
rather than from a guess.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from fieldplan.errors import InputError
from fieldplan.estimate.cluster import icc_anova

__all__ = [
    "SizingInputs",
    "Variability",
    "describe_for_sizing",
    "observed_variability",
    "plan_variability",
    "plan_options",
]


@dataclass(frozen=True)
class Variability:
    """Observed spread of a variable.

    ``sd`` is the pooled within-group standard deviation when groups are given
    (the spread a new sample inside one block faces), otherwise the overall
    one. ``icc`` is NaN unless clusters with several units each were given.
    """

    mean: float
    sd: float
    cv: float
    n: int
    df: float
    icc: float
    mean_cluster_size: float


def observed_variability(
    values: ArrayLike,
    *,
    groups: ArrayLike | None = None,
    clusters: ArrayLike | None = None,
) -> Variability:
    """Standard deviation, CV and intra-cluster correlation from results.

    Parameters
    ----------
    values : array_like of float
        One value per point (or per plant with ``clusters``); NaN ignored.
    groups : array_like, optional, keyword-only
        Block or stratum of each value; the SD is then pooled within groups
        (``Σ (n_h − 1) s_h² / Σ (n_h − 1)``) so block differences do not
        inflate it.
    clusters : array_like, optional, keyword-only
        Cluster (point) of each value, for the ANOVA intra-cluster correlation.
    """
    y = np.asarray(values, dtype=float)
    ok = np.isfinite(y)
    if ok.sum() < 2:
        raise InputError("need at least 2 numeric values to measure variability")
    g = np.zeros(y.shape, dtype=object) if groups is None else np.asarray(groups, dtype=object)
    d = pd.DataFrame({"g": g[ok].astype(str), "y": y[ok]})
    agg = d.groupby("g")["y"].agg(["count", "var"])
    dfs = (agg["count"] - 1).clip(lower=0).to_numpy(dtype=float)
    if dfs.sum() < 1:
        raise InputError("every group has a single value: no within-group spread to measure")
    pooled = float(np.sqrt(np.nansum(dfs * agg["var"].fillna(0.0).to_numpy()) / dfs.sum()))
    mean = float(d["y"].mean())
    icc, mbar = float("nan"), float("nan")
    if clusters is not None:
        c = np.asarray(clusters, dtype=object)[ok]
        # Within groups: block differences are not likeness of plants within a cluster.
        icc = icc_anova(y[ok], c, None if groups is None else g[ok])
        mbar = float(ok.sum() / max(len(set(map(str, c))), 1))
    return Variability(
        mean=mean,
        sd=pooled,
        cv=pooled / abs(mean) if mean != 0 else float("nan"),
        n=int(ok.sum()),
        df=float(dfs.sum()),
        icc=icc,
        mean_cluster_size=mbar,
    )


def plan_variability(
    points: pd.DataFrame, blocks: pd.DataFrame, results: pd.DataFrame, *, value: str, by: str = "block"
) -> tuple[Variability, int]:
    """Variability of ``value`` in a plan's latest results round.

    The SD is pooled within blocks; the ICC is estimated when the round has one
    row per plant (a ``unit`` column) for cluster points. Returns the
    :class:`Variability` and the round number used.
    """
    from fieldplan.estimate.table import point_values

    d = point_values(points, blocks, results, value=value)
    latest = int(d["round"].max())
    d = d[d["round"] == latest]
    per_plant = (d["unit"].astype(str) != "").any() and d.duplicated("point_id").any()
    v = observed_variability(
        d["value"].to_numpy(dtype=float),
        groups=d[by].to_numpy(),
        clusters=d["point_id"].to_numpy() if per_plant else None,
    )
    return v, latest


@dataclass(frozen=True)
class SizingInputs:
    """What ``fieldplan size --from-plan PLAN`` takes from a plan and its results.

    ``clusters`` is true for cluster plans: the size is then a number of
    clusters. ``per_plant`` says the results hold one value per plant (so an
    ICC and Kish's design effect apply); otherwise each cluster is one
    composite value and its spread is already the spread between clusters.
    ``per`` is ``"block"`` or ``"stratum"``: what one sized sample covers.
    """

    cv: float | None
    sd: float | None
    icc: float | None
    plants_per_cluster: int | None
    clusters: bool
    per_plant: bool
    per: str
    strata_by: str | None
    n_groups: int
    params: dict
    summary: str
    median_ha: float = float("nan")  # median sampled block area, for a grid density


def plan_options(inputs: SizingInputs, *, clusters: int | None, n: int) -> str:
    """The ``fieldplan plan`` options that give ``clusters`` (or ``n`` points) per block or stratum."""
    p = inputs.params
    parts = ["fieldplan plan BLOCKS"]
    if inputs.clusters:
        parts.append("--design clusters")
        m = inputs.plants_per_cluster or 1
        k = int(clusters if clusters is not None else n)
        if inputs.per == "stratum":
            parts += [f"--strata-by {inputs.strata_by}", f"--target-units {k * m}", f"--plants-per-cluster {m}"]
        else:
            parts += [f"--per-block {k}", f"--plants-per-cluster {m}"]
        for key, flag in (("skip_row_ends", "--skip-row-ends"), ("skip_border_rows", "--skip-border-rows")):
            if p.get(key):
                parts.append(f"{flag} {p[key]}")
    elif p.get("design") == "grid":
        # A grid's count follows the area: the density giving n points in a block of median size
        # (the smallest blocks would ask for an absurd density).
        if not (inputs.median_ha > 0):
            return ""
        parts += ["--design grid", f"--per-ha {math.ceil(100 * n / inputs.median_ha) / 100:g}"]
    else:
        design = p.get("design", "random")
        parts.append(f"--design {design if design in ('random', 'balanced') else 'random'}")
        if inputs.per == "stratum":
            parts.append(f"--strata-by {inputs.strata_by}")
        parts.append(f"--per-block {n}" if inputs.per == "block" else f"--n {n * inputs.n_groups}")
    parts.append("--out NEW_PLAN")
    return " ".join(parts)


def describe_for_sizing(
    plan_dir,
    *,
    value: str | None,
    cv: float | None,
    sd: float | None,
    icc: float | None,
    relative: bool,
    plants_per_cluster: int | None = None,
) -> SizingInputs:
    """Fill the sample-size inputs the user left out from a plan's results.

    Reads the plan folder (``plan.gpkg``); values given explicitly win.
    ``relative`` says the margin is in percent of the mean, so a CV (percent)
    is filled, otherwise an SD. For a cluster plan the plants per cluster come
    from the plan (or the results' mean cluster size) and, with one value per
    plant, the ICC within blocks from the results; with one composite value per
    cluster the spread between clusters is used as is and the size is in
    clusters directly.
    """
    from fieldplan.errors import OptionError
    from fieldplan.results import normalise_column, stored_results
    from fieldplan.store import load_plan

    if not value:
        raise OptionError("--from-plan needs --variable naming the variable to size for, e.g. --variable brix")
    plan = load_plan(plan_dir)
    params = dict(plan.params)
    name = normalise_column(value)
    strata_by = params.get("strata_by")
    v, rnd = plan_variability(
        plan.points, plan.blocks, stored_results(plan.layers), value=name, by="stratum" if strata_by else "block"
    )
    is_clusters = params.get("design") == "clusters"
    per_plant = bool(np.isfinite(v.icc))
    if relative and cv is None:
        cv = 100.0 * v.cv
    if not relative and sd is None:
        sd = v.sd
    m = None
    if is_clusters:
        m = plants_per_cluster or params.get("plants_per_cluster") or params.get("units_per_cluster")
        if m is None and np.isfinite(v.mean_cluster_size):
            m = int(round(v.mean_cluster_size))
        m = int(m) if m else 1
        if per_plant and icc is None:
            icc = max(0.0, v.icc)
    elif icc is None and np.isfinite(v.icc):
        icc = max(0.0, v.icc)
    per = "stratum" if strata_by else "block"
    n_groups = int(plan.blocks["stratum"].nunique()) if strata_by and "stratum" in plan.blocks else len(plan.blocks)
    icc_text = f", ICC within {per}s {v.icc:.3f}" if np.isfinite(v.icc) else ""
    spread = f"SD within {per}s" + (" between clusters (composite values)" if is_clusters and not per_plant else "")
    summary = (
        f"From {plan_dir} round {rnd} ({v.n} values of {name}): "
        f"mean {v.mean:.4g}, {spread} {v.sd:.4g}, CV {100 * v.cv:.1f} %{icc_text}"
    )
    area = plan.blocks["sampled_area_ha"] if "sampled_area_ha" in plan.blocks else plan.blocks.get("area_ha")
    area = pd.to_numeric(area, errors="coerce") if area is not None else pd.Series(dtype=float)
    sampled = area[plan.blocks["block"].astype(str).isin(set(plan.points["block"].astype(str)))]
    median = float(sampled[sampled > 0].median()) if (sampled > 0).any() else float("nan")
    return SizingInputs(
        cv=cv, sd=sd, icc=icc if (not is_clusters or per_plant) else None, plants_per_cluster=m,
        clusters=is_clusters, per_plant=per_plant, per=per, strata_by=strata_by, n_groups=n_groups,
        params=params, summary=summary, median_ha=median,
    )  # fmt: skip
