"""Marking points inaccessible in a plan folder, and undoing it.

The rule that keeps the design valid: **the sample is the first n points of the
draw order that are not marked inaccessible**, per stratum. The draw order is
the selected points in plan order followed by the spares by ``spare_rank``;
for a grid plan with within-cell substitutes, a point's substitute stands in
for it first. The state of the plan is therefore a function of the points as
planned (kept in the ``points_planned`` layer of plan.gpkg from the first mark
on) and the set of points currently marked inaccessible (replayed from the
append-only ``events`` table), not of the order marks were made in: restoring
every point gives back the plan as it was planned.

Statuses written to the points files: ``selected`` (planned and still to be
sampled), ``spare`` (not needed), ``replacement`` (a spare now needed),
``substitute`` (a within-cell substitute now needed), ``inaccessible``.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from datetime import datetime
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from fieldplan.errors import OptionError
from fieldplan.field.events import (
    EVENTS_LAYER,
    INACCESSIBLE,
    RESTORE,
    make_events,
    number_events,
    stored_events,
    write_numbered_events,
)
from fieldplan.field.spares import SELECTED, SPARE
from fieldplan.field.substitutes import SUBSTITUTES_LAYER, SUFFIX
from fieldplan.route.folder import inherit_crews
from fieldplan.samples.purpose import field_cores, with_notes

__all__ = [
    "PLANNED_LAYER",
    "SUBSTITUTES_LAYER",
    "REPLACEMENT",
    "SUBSTITUTE",
    "SUBSTITUTE_SUFFIX",
    "MarkResult",
    "inaccessible_set",
    "field_points",
    "mark_points",
    "substitution_summary",
    "MAX_REPLACED_SHARE",
    "replacement_warnings",
    "substitution_notes",
]

#: Share of a stratum's planned points that may be given up before ``fieldplan check`` warns.
#: Beyond a fifth, the estimate describes the reachable part of the stratum more than the
#: stratum itself (common practice, no source).
MAX_REPLACED_SHARE = 0.2

PLANNED_LAYER = "points_planned"
REPLACEMENT = "replacement"
SUBSTITUTE = "substitute"
SUBSTITUTE_SUFFIX = SUFFIX
_OWN_LAYERS = (EVENTS_LAYER, PLANNED_LAYER)


@dataclass(frozen=True)
class MarkResult:
    """What a mark or restore did: the rows recorded and the points now to be sampled."""

    events: pd.DataFrame
    points: gpd.GeoDataFrame
    notes: list[str]


def inaccessible_set(events: pd.DataFrame) -> list[str]:
    """Points marked inaccessible and not restored since, in the order first marked."""
    state: dict[str, bool] = {}
    for action, point in zip(events["action"], events["point_id"], strict=True):
        if action == INACCESSIBLE:
            state.setdefault(point, True)
            state[point] = True
        elif action == RESTORE:
            state[point] = False
    return [p for p, off in state.items() if off]


def _planned_status(planned: pd.DataFrame) -> np.ndarray:
    if "status" in planned.columns:
        return planned["status"].fillna(SELECTED).astype(str).to_numpy()
    return np.full(len(planned), SELECTED, dtype=object)


def field_points(
    planned: gpd.GeoDataFrame, inaccessible: list[str], substitutes: gpd.GeoDataFrame | None = None
) -> gpd.GeoDataFrame:
    """The points to write, given the points as planned and those marked inaccessible.

    Parameters
    ----------
    planned : geopandas.GeoDataFrame
        Points as planned (``point_id, stratum``; optional ``status, spare_rank``).
    inaccessible : list of str
        Point or substitute ids currently marked inaccessible.
    substitutes : geopandas.GeoDataFrame, optional
        ``point_id, substitute_id, geometry``: one precomputed substitute per grid point.

    Returns
    -------
    geopandas.GeoDataFrame
        ``planned`` itself when nothing is marked; otherwise a copy with a
        ``status`` column and activated substitutes inserted after their point.
    """
    if not inaccessible:
        return planned
    off = set(inaccessible)
    pts = planned.reset_index(drop=True).copy()
    status = _planned_status(pts)
    ids = pts["point_id"].astype(str).to_numpy()
    gone = np.isin(ids, list(off))
    covered = np.zeros(len(pts), dtype=bool)
    sub_rows = None
    if substitutes is not None and len(substitutes):
        subs = substitutes[substitutes["point_id"].isin(ids[gone])]
        subs = subs[~subs.geometry.is_empty & subs.geometry.notna()]
        if len(subs):
            lookup = pts.set_index("point_id")
            rows = lookup.loc[subs["point_id"].astype(str)].reset_index()
            rows["point_id"] = subs["substitute_id"].astype(str).to_numpy()
            rows = gpd.GeoDataFrame(rows, geometry=rows.geometry.name, crs=pts.crs)
            rows[rows.geometry.name] = subs.geometry.to_crs(pts.crs).to_numpy()
            sub_ok = ~rows["point_id"].isin(list(off)).to_numpy()
            rows["status"] = np.where(sub_ok, SUBSTITUTE, INACCESSIBLE).astype(object)
            if "spare_rank" in rows.columns:
                rows["spare_rank"] = 0
            rows["_after"] = pd.Index(ids).get_indexer(subs["point_id"].astype(str))
            covered[rows["_after"].to_numpy()[sub_ok]] = True
            sub_rows = rows
    # Per stratum, the sample is the first n accessible points of the draw order.
    is_spare = status == SPARE
    rank = pts["spare_rank"].to_numpy(dtype=float) if "spare_rank" in pts.columns else np.zeros(len(pts))
    order = np.lexsort((np.where(is_spare, rank, 0.0), is_spare, pts["stratum"].astype(str).to_numpy()))
    strata = pts["stratum"].astype(str).to_numpy()[order]
    usable = (~gone | covered)[order]
    n_selected = pd.Series(~is_spare[order]).groupby(strata).transform("sum").to_numpy()
    taken = pd.Series(usable.astype(int)).groupby(strata).cumsum().to_numpy()
    active = np.zeros(len(pts), dtype=bool)
    active[order] = usable & (taken <= n_selected)
    new_status = np.where(
        gone, INACCESSIBLE, np.where(is_spare, np.where(active, REPLACEMENT, SPARE), status)
    )
    pts["status"] = new_status.astype(object)
    if sub_rows is None:
        return pts
    pts["_after"] = np.arange(len(pts))
    pts["_sub"] = 0
    sub_rows["_sub"] = 1
    merged = pd.concat([pts, sub_rows[pts.columns]], ignore_index=True)
    merged = merged.sort_values(["_after", "_sub"], kind="stable").drop(columns=["_after", "_sub"])
    return gpd.GeoDataFrame(merged.reset_index(drop=True), geometry=pts.geometry.name, crs=pts.crs)


def _active_ids(points: gpd.GeoDataFrame) -> set[str]:
    if "status" not in points.columns:
        return set(points["point_id"].astype(str))
    keep = points["status"].isin([SELECTED, REPLACEMENT, SUBSTITUTE])
    return set(points.loc[keep, "point_id"].astype(str))


def _replacements(
    before: gpd.GeoDataFrame, after: gpd.GeoDataFrame, point_ids: list[str], planned: pd.DataFrame
) -> list[str]:
    """Pair each changed point with a point that became (or stopped being) active, per stratum."""
    gained = _active_ids(after) ^ _active_ids(before)
    both = pd.concat([before[["point_id", "stratum"]], after[["point_id", "stratum"]]])
    stratum_of = dict(zip(both["point_id"].astype(str), both["stratum"].astype(str), strict=False))
    order = {pid: i for i, pid in enumerate(after["point_id"].astype(str))}
    order.update({pid: i for i, pid in enumerate(before["point_id"].astype(str)) if pid not in order})
    pool = sorted(gained - set(point_ids), key=lambda p: order.get(p, 0))
    out = []
    for pid in point_ids:
        own = [p for p in pool if p == pid + SUBSTITUTE_SUFFIX]
        same = own or [p for p in pool if stratum_of.get(p) == stratum_of.get(pid)]
        pick = same[0] if same else ""
        if pick:
            pool.remove(pick)
        out.append(pick)
    return out


def _canonical_ids(ids: list[str], known: set[str]) -> list[str]:
    """The plan's spelling of each id: ids typed on a phone or from a label often change case.

    An exact match wins; otherwise a case-insensitive one, if it names one point only.
    """
    folded: dict[str, list[str]] = {}
    for pid in sorted(known):
        folded.setdefault(pid.casefold(), []).append(pid)
    out = []
    for pid in ids:
        same = folded.get(pid.casefold(), [])
        out.append(pid if pid in known or len(same) != 1 else same[0])
    return list(dict.fromkeys(out))


def _normalised_blocks(blocks: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    # plan.gpkg stores blocks as MultiPolygon; single parts go back to Polygon so the
    # re-written outputs match those of the freshly planned folder.
    geoms = blocks.geometry.values
    single = (shapely.get_type_id(geoms) == 6) & (shapely.get_num_geometries(geoms) == 1)
    if not single.any():
        return blocks
    out = blocks.copy()
    fixed = np.asarray(geoms, dtype=object).copy()
    fixed[single] = shapely.get_geometry(geoms[single], 0)
    out[out.geometry.name] = gpd.array.from_shapely(fixed, crs=blocks.crs)
    return out


def mark_points(
    plan_dir: str | Path,
    point_ids: list[str],
    *,
    action: str = INACCESSIBLE,
    reason: str = "",
    by: str | None = None,
    now: datetime | None = None,
) -> MarkResult:
    """Mark points inaccessible (or restore them), record the events and re-write the plan files.

    Parameters
    ----------
    plan_dir : path
        A folder written by ``fieldplan plan``.
    point_ids : list of str
        Point ids (or substitute ids) to change.
    action : {"inaccessible", "restore"}
    reason : str
        Why; stored in the events table.
    by : str, optional
        Who; defaults to ``$USER``.
    """
    from fieldplan.store import transaction

    if action not in (INACCESSIBLE, RESTORE):
        raise OptionError(f"action must be {INACCESSIBLE!r} or {RESTORE!r}; got {action!r}")
    plan_dir = Path(plan_dir)
    ids = list(dict.fromkeys(str(p).strip() for p in point_ids if str(p).strip()))
    if not ids:
        raise OptionError("give at least one point id (see points.csv), or --ids-file, a file of ids")
    # The plan and its events are read under the folder's lock and the change is committed
    # before it is released, so two marks at once cannot both build on the same events.
    with transaction(plan_dir) as txn:
        plan = txn.plan
        events = stored_events(plan)
        planned_layer = plan.layers.get(PLANNED_LAYER)
        first_mark = planned_layer is None
        planned = (
            plan.points if first_mark else gpd.GeoDataFrame(planned_layer).set_crs(plan.crs, allow_override=True)
        )
        substitutes = plan.layers.get(SUBSTITUTES_LAYER)
        known = set(planned["point_id"].astype(str))
        if substitutes is not None and len(substitutes):
            known |= set(substitutes["substitute_id"].astype(str))
        ids = _canonical_ids(ids, known)
        unknown = [p for p in ids if p not in known]
        if unknown:
            raise OptionError(
                f"{plan_dir}: point {unknown[0]!r} is not in this plan; check the id in points.csv"
            )
        off = inaccessible_set(events)
        if action == INACCESSIBLE:
            again = [p for p in ids if p in off]
            if again:
                raise OptionError(f"point {again[0]!r} is already marked inaccessible; restore it first")
            after_off = off + ids
        else:
            missing = [p for p in ids if p not in off]
            if missing:
                raise OptionError(f"point {missing[0]!r} is not marked inaccessible; nothing to restore")
            after_off = [p for p in off if p not in ids]
        before = field_points(planned, off, substitutes)
        after = field_points(planned, after_off, substitutes)
        # Soil plans: a substitute in use gets its own cores; those of points given up are retired.
        cores, after, moved = field_cores(plan, after)
        repl = _replacements(before, after, ids, planned)
        # With crews, a point brought in joins the crew (and takes the place) of the one it replaces.
        after = inherit_crews(plan.points, after, ids, repl, restore=action == RESTORE)
        rows = make_events([action] * len(ids), ids, replacement_ids=repl, reason=reason, user=by, now=now)
        notes = []
        if action == INACCESSIBLE:
            notes = [
                f"{p}: no spare or substitute left in its stratum"
                for p, r in zip(ids, repl, strict=True)
                if not r
            ]

        stored = number_events(events, rows)
        # plan.gpkg is the record: the layers go into the store's private copy, swapped in at commit.
        txn.set_layer("points", after, geometry_type="Point")
        if first_mark:
            txn.set_layer(PLANNED_LAYER, planned, geometry_type="Point")
        if cores is not None:
            txn.set_layer("cores", cores, geometry_type="Point")
        txn.edit(lambda path: write_numbered_events(path, stored, append=len(events) > 0), layers=("events",))
        layers = {k: v for k, v in plan.layers.items() if k not in _OWN_LAYERS}
        if cores is not None:
            layers["cores"] = cores
        notes += [f"block {b}: {text}" for b, texts in moved.items() for text in texts]
        # The derived files of this change also carry the notes on moved cores.
        txn.view = replace(
            plan, points=after, blocks=with_notes(_normalised_blocks(plan.blocks), moved), layers=layers
        )
    return MarkResult(stored, after, notes)


def substitution_summary(plan) -> pd.DataFrame:
    """Per stratum: points planned, now sampled, inaccessible, replaced by spares or substitutes.

    Estimates quote this so a reader sees how far the field departed from the plan
    and by which rule (``rule``: spares in draw order, within-cell substitute, none).

    Returns
    -------
    pandas.DataFrame
        ``stratum, n_planned, n_sampled, n_inaccessible, n_replacement,
        n_substitute, share_replaced, rule``.
    """
    points = plan.points
    columns = [
        "stratum", "n_planned", "n_sampled", "n_inaccessible", "n_replacement", "n_substitute",
        "share_replaced", "rule",
    ]  # fmt: skip
    if len(points) == 0:
        return pd.DataFrame(columns=columns)
    pid = points["point_id"].astype(str)
    status = (
        points["status"].astype(str)
        if "status" in points.columns
        else pd.Series(SELECTED, index=points.index)
    )
    rank = (
        points["spare_rank"].fillna(0) if "spare_rank" in points.columns else pd.Series(0, index=points.index)
    )
    sub_layer = plan.layers.get(SUBSTITUTES_LAYER)
    sub_ids = (
        set(sub_layer["substitute_id"].astype(str)) if sub_layer is not None and len(sub_layer) else set()
    )
    table = pd.DataFrame(
        {
            "stratum": points["stratum"].astype(str),
            "n_planned": (rank == 0) & ~pid.isin(sub_ids) & (status != SPARE),
            "n_sampled": status.isin([SELECTED, REPLACEMENT, SUBSTITUTE]),
            "n_inaccessible": status == INACCESSIBLE,
            "n_replacement": status == REPLACEMENT,
            "n_substitute": status == SUBSTITUTE,
        }
    )
    out = table.groupby("stratum", sort=True).sum().astype(int).reset_index()
    out["share_replaced"] = (
        (out["n_replacement"] + out["n_substitute"]) / out["n_planned"].clip(lower=1)
    ).round(4)
    has_spares = bool((rank > 0).any())
    if plan.params.get("substitute") == "within-cell" or sub_ids:
        rule = "within-cell substitute (uniform point of the same grid cell)"
    elif has_spares:
        rule = "spares in draw order (first n accessible points of the draw)"
    else:
        rule = "none (inaccessible points are dropped)"
    out["rule"] = rule
    return out[columns]


def replacement_warnings(plan, *, max_share: float = MAX_REPLACED_SHARE) -> list[str]:
    """One line per stratum where more than ``max_share`` of the planned points were given up."""
    table = substitution_summary(plan)
    if table.empty:
        return []
    given_up = table["n_inaccessible"].clip(upper=table["n_planned"])
    share = given_up / table["n_planned"].clip(lower=1)
    lines = []
    for row, part in zip(table.itertuples(index=False), share, strict=True):
        if part > max_share:
            lines.append(
                f"stratum {row.stratum}: {int(min(row.n_inaccessible, row.n_planned))} of {row.n_planned} "
                f"planned points ({part:.0%}) marked inaccessible, {row.n_replacement + row.n_substitute} "
                f"replaced; estimates describe the reachable ground (rule: {row.rule})"
            )
    return lines


def substitution_notes(plan) -> list[str]:
    """Sentences for an estimate: per stratum with changes, what was given up and what replaced it."""
    table = substitution_summary(plan)
    lines = []
    for row in table.itertuples(index=False):
        if row.n_inaccessible == 0 and row.n_replacement == 0 and row.n_substitute == 0:
            continue
        lines.append(
            f"stratum {row.stratum}: {row.n_inaccessible} point(s) marked inaccessible, "
            f"{row.n_replacement} spare(s) and {row.n_substitute} substitute(s) used, "
            f"{row.n_sampled} of {row.n_planned} planned points sampled; rule: {row.rule}"
        )
    return lines
