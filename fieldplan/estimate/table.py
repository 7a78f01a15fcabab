"""The estimates table for a plan: picks the estimator matching the plan's design.

Pure function of the plan's points and blocks and the stored results rows
(:func:`fieldplan.results.stored_results`); no file I/O.

* grid, random and balanced designs: within a block the points are treated as
  a simple random sample (stated in the ``estimator`` column; for grids and
  balanced samples this is conservative on spatially correlated fields, see
  docs/validity.md). A group of several blocks (stratum, variety, farm, and
  the ``all`` row) is a stratified estimate with blocks as strata weighted by
  their sampled area (Cochran 1977, ch. 5).
* clusters: within one stratum the ratio estimator over clusters,
  ``Σ y_i / Σ m_i``, with its linearised variance; a group of several strata
  (variety, farm, the ``all`` row) is the separate ratio estimator, one ratio
  per stratum combined with area weights (Cochran 1977, §6.10-6.11). With one
  row per plant also the intra-cluster correlation (within strata) and the
  observed design effect.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from fieldplan.errors import InputError, OptionError
from fieldplan.estimate.cluster import icc_anova, ratio_mean, stratified_ratio_mean
from fieldplan.estimate.intervals import check_confidence, t_interval
from fieldplan.estimate.readiness import check_target, prob_reached, project_blocks
from fieldplan.estimate.stratified import ONE_POINT_NOTE, stratified_mean
from fieldplan.estimate.systematic import successive_difference_se, systematic_mean
from fieldplan.sorting import natural_key

__all__ = ["GROUPINGS", "estimate_table", "point_values"]

GROUPINGS = ("block", "stratum", "variety", "farm")
ALL = "all"


def point_values(
    points: pd.DataFrame, blocks: pd.DataFrame, results: pd.DataFrame, *, value: str
) -> pd.DataFrame:
    """One row per point (or plant) and round with its value and grouping columns.

    Returns columns ``round, date, point_id, unit, value, units_measured, x, y,
    block, stratum, variety, farm, area, plan_units``.
    """
    r = results[results["variable"] == value]
    if r.empty:
        have = sorted(results["variable"].unique()) if len(results) else []
        raise InputError(
            f"no stored results for {value!r}; stored variables: {have or 'none'} "
            "(import a file with 'fieldplan results PLAN_DIR FILE')"
        )
    pts = pd.DataFrame(
        {
            "point_id": points["point_id"].astype(str).to_numpy(),
            "block": points["block"].astype(str).to_numpy(),
            "x": points.geometry.x.to_numpy(),
            "y": points.geometry.y.to_numpy(),
            "point_stratum": points["stratum"].astype(str).to_numpy() if "stratum" in points else None,
            "plan_units": points["units"].to_numpy(dtype=float) if "units" in points else np.nan,
        }
    )
    b = pd.DataFrame(blocks.drop(columns="geometry", errors="ignore")).copy()
    b["block"] = b["block"].astype(str)
    area = b["sampled_area_ha"] if "sampled_area_ha" in b else b.get("area_ha")
    meta = pd.DataFrame(
        {
            "block": b["block"],
            "stratum": b["stratum"].astype(str) if "stratum" in b else b["block"],
            "variety": b["variety"].fillna("(none)").astype(str) if "variety" in b else "(none)",
            "farm": b["farm"].fillna("(none)").astype(str) if "farm" in b else "(none)",
            "area": pd.to_numeric(area, errors="coerce") if area is not None else 1.0,
        }
    )
    out = r[["round", "date", "point_id", "unit", "value", "units_measured"]].merge(
        pts, on="point_id", how="inner"
    )
    out = out.merge(meta, on="block", how="left")
    # A design may stratify within blocks; the points then carry the finer stratum.
    if out["point_stratum"].notna().all():
        out["stratum"] = out["point_stratum"]
    return out.drop(columns="point_stratum")


def _srs_like(sub: pd.DataFrame, *, confidence: float, local: bool) -> dict:
    """Stratified-by-block estimate (a single block reduces to SRS)."""
    blocks = sub.groupby("block")["area"].first()
    sizes = {k: (v if np.isfinite(v) and v > 0 else 1.0) for k, v in blocks.items()}
    if len(sizes) == 1:
        e = systematic_mean(sub["value"], sub["x"], sub["y"], confidence=confidence)
        row = {
            "estimator": "mean, points as simple random sample",
            "n": e.n,
            "mean": e.mean,
            "se": e.se_srs,
            "df": e.df,
            "lower": e.lower_srs,
            "upper": e.upper_srs,
            "note": e.note,
        }
        if local:
            row.update(se_local=e.se_local, lower_local=e.lower_local, upper_local=e.upper_local)
        return row
    e = stratified_mean(sub["value"], sub["block"], sizes=sizes, single="pooled", confidence=confidence)
    row = {
        "estimator": "stratified by block, area weights",
        "n": e.n,
        "mean": e.mean,
        "se": e.se,
        "df": e.df,
        "lower": e.lower,
        "upper": e.upper,
        "note": e.note,
    }
    if local:
        # Local differences within each block, combined with the same weights; a
        # one-point block borrows the pooled within-block variance, as above.
        w = e.strata.set_index("group")["weight"]
        tab = e.strata.set_index("group")
        ok = tab["n"] >= 2
        pooled = float(((tab["n"] - 1) * tab["sd"] ** 2)[ok].sum() / (tab["n"] - 1)[ok].sum())
        v = 0.0
        for k, g in sub.groupby("block"):
            se_k = successive_difference_se(g["value"], g["x"], g["y"])
            v += w[k] ** 2 * (se_k**2 if np.isfinite(se_k) else pooled / len(g))
        se_l = float(np.sqrt(v))
        lo, hi = t_interval(e.mean, se_l, e.df, confidence=confidence)
        row.update(se_local=se_l, lower_local=float(lo), upper_local=float(hi))
    return row


def _cluster_totals(sub: pd.DataFrame) -> tuple[pd.DataFrame, bool]:
    """One row per cluster: ``point_id, block, stratum, area, y`` (total), ``m`` (units)."""
    per_plant = bool((sub["unit"].astype(str) != "").any() and sub.duplicated("point_id").any())
    if per_plant:
        y = sub["value"].astype(float)
        m = pd.Series(np.isfinite(y.to_numpy()).astype(float), index=sub.index)
    else:
        m = sub["units_measured"].astype(float)
        m = m.where(np.isfinite(m), sub["plan_units"].astype(float)).fillna(1.0)
        y = sub["value"].astype(float) * m
    frame = sub[["point_id", "block", "stratum", "area"]].assign(y=y.to_numpy(), m=m.to_numpy())
    frame = frame[np.isfinite(frame["y"].to_numpy())]
    totals = frame.groupby("point_id", sort=False).agg(
        block=("block", "first"), stratum=("stratum", "first"), area=("area", "first"), y=("y", "sum"), m=("m", "sum")
    )
    return totals.reset_index(), per_plant


def _clusters(sub: pd.DataFrame, *, confidence: float) -> dict:
    """Ratio estimate over clusters; over several strata, the separate ratio estimator.

    Each design stratum (a block unless the plan was stratified by a field) gets
    its own ratio; strata are combined with weights from their sampled area
    (Cochran 1977, §6.10-6.11 and ch. 5), never pooled into one ratio.
    """
    totals, per_plant = _cluster_totals(sub)
    strata = totals["stratum"].astype(str)
    multi = strata.nunique() > 1
    if multi:
        # Area of each stratum within this group: its blocks' sampled areas, each counted once.
        blocks = totals.drop_duplicates("block")
        area = blocks["area"].astype(float).where(lambda a: np.isfinite(a) & (a > 0), 1.0)
        sizes = area.groupby(blocks["stratum"].astype(str).to_numpy()).sum().to_dict()
        e = stratified_ratio_mean(
            totals["y"], totals["m"], strata, weights=sizes, single="pooled", confidence=confidence
        )
        kind = "block" if (totals["stratum"].astype(str) == totals["block"].astype(str)).all() else "stratum"
        estimator = f"stratified by {kind} (area weights), separate ratio per {kind}, linearised variance"
    else:
        e = ratio_mean(totals["y"].to_numpy(), totals["m"].to_numpy(), confidence=confidence)
        estimator = "ratio over clusters, linearised variance"
    icc = deff = float("nan")
    if per_plant:
        vals = sub[np.isfinite(sub["value"].astype(float).to_numpy())]
        icc = icc_anova(vals["value"], vals["point_id"], vals["stratum"].astype(str) if multi else None)
        # Observed design effect: the cluster variance over that of as many plants drawn at random
        # within the same strata (Kish 1965).
        g = vals.groupby(vals["stratum"].astype(str).to_numpy())["value"].agg(["count", "var"])
        if multi:
            w = e.strata.set_index("group")["weight"].reindex(g.index).to_numpy()
            v_srs = float(np.sum(w**2 * g["var"].to_numpy() / g["count"].to_numpy()))
        else:
            v_srs = float(g["var"].iloc[0] / g["count"].iloc[0]) if g["count"].iloc[0] > 1 else np.nan
        deff = e.se**2 / v_srs if np.isfinite(v_srs) and v_srs > 0 else float("nan")
    return {
        "estimator": estimator,
        "n": e.n_clusters,
        "units": e.n_units,
        "mean": e.mean,
        "se": e.se,
        "df": e.df,
        "lower": e.lower,
        "upper": e.upper,
        "icc": icc,
        "deff": deff,
        "note": e.note,
    }


def _one(sub: pd.DataFrame, *, design: str, confidence: float, local: bool) -> dict:
    if design == "clusters":
        return _clusters(sub, confidence=confidence)
    return _srs_like(sub, confidence=confidence, local=local)


def estimate_table(
    points: pd.DataFrame,
    blocks: pd.DataFrame,
    results: pd.DataFrame,
    *,
    value: str,
    design: str = "grid",
    by: str = "block",
    confidence: float = 0.95,
    target: float | None = None,
    local_variance: bool = False,
    round_no: int | None = None,
    direction: str = "above",
) -> pd.DataFrame:
    """Estimates for one round (the latest by default), one row per group plus an ``all`` row.

    Parameters
    ----------
    points, blocks : DataFrame
        The plan's points (with geometry) and blocks.
    results : DataFrame
        Stored results rows (all rounds).
    value : str
        Variable to estimate.
    design : str, keyword-only
        The plan's design (``plan.params["design"]``).
    by : {"block", "stratum", "variety", "farm"}, keyword-only
    confidence : float, keyword-only
    target : float, optional, keyword-only
        Adds ``p_reached`` and, with two or more dated rounds up to the chosen
        one, the projected date the group mean reaches it. A target far
        outside the round's values is refused (:func:`check_target`).
    local_variance : bool, keyword-only
        Adds the successive-difference standard error and interval.
    round_no : int, optional, keyword-only
        Round to report (default the latest); later rounds are ignored, also
        by the trend.
    direction : {"above", "below"}, keyword-only
        Whether the target is reached by rising to it (Brix) or falling to it
        (titratable acidity): ``p_reached`` is ``P(μ ≥ target)`` or ``P(μ ≤ target)``.
    """
    c = check_confidence(confidence)
    if by not in GROUPINGS:
        raise OptionError(f"--group-by must be one of {', '.join(GROUPINGS)}; got {by!r}")
    d = point_values(points, blocks, results, value=value)
    if by == "farm" and "farm" not in blocks:
        raise OptionError("--group-by farm needs a 'farm' column in the blocks; use block or stratum")
    stored = sorted(int(r) for r in d["round"].unique())
    if round_no is None:
        latest = stored[-1]
    elif int(round_no) in stored:
        latest = int(round_no)
        d = d[d["round"] <= latest]
    else:
        raise OptionError(
            f"no results round {round_no} for {value!r}; stored rounds: {', '.join(map(str, stored))}"
        )
    if target is not None:
        check_target(d.loc[d["round"] == latest, "value"], float(target), value=value, round_no=latest)
    rows = []
    # One estimate per (round, group): a handful of groups, not a loop over points.
    for rnd, dr in d.groupby("round", sort=True):
        date = _round_date(dr)
        # Groups in natural order (Blk 2 before Blk 10), as block ids are listed everywhere.
        groups = sorted(dr.groupby(by, sort=False), key=lambda gs: natural_key(gs[0])) + [(ALL, dr)]
        for g, sub in groups:
            row = _one(sub, design=design, confidence=c, local=local_variance)
            if row["n"] == 1 and not row["note"]:
                row["note"] = ONE_POINT_NOTE
            rows.append({"group": g, "round": int(rnd), "date": date, **row})
    allrounds = pd.DataFrame(rows)
    out = allrounds[allrounds["round"] == latest].reset_index(drop=True)
    if target is not None:
        out["p_reached"] = prob_reached(out["mean"], out["se"], out["df"], float(target), direction=direction)
        out["direction"] = direction
        dated = allrounds.dropna(subset=["date"])
        if dated["round"].nunique() >= 2:
            proj = project_blocks(dated, float(target), confidence=c, direction=direction)
            proj = proj.rename(columns={"note": "trend_note"})
            out = out.merge(
                proj[["group", "rounds", "target_date", "date_lower", "date_upper", "trend_note"]],
                on="group",
                how="left",
            )
    out.insert(1, "by", by)
    return out


def _round_date(dr: pd.DataFrame) -> pd.Timestamp | None:
    dates = pd.to_datetime(dr["date"].replace("", np.nan), errors="coerce").dropna()
    if dates.empty:
        return None
    return dates.sort_values().iloc[len(dates) // 2]
