"""Revisit permanent sites: plan a new round at the points of an earlier plan.

Soil-monitoring programmes and trials go back to the same spots every season.
:func:`revisit_plan` keeps every site of an earlier plan where it was (the same
coordinates in the same CRS, so to the millimetre and closer), keeps its
``point_id`` and gives this round new sample ids, each linked to the earlier
one in ``previous_sample_id``. Soil cores go back to the earlier cores' spots.

Blocks are compared with the earlier plan's: a block whose boundary moved by
more than :data:`SHAPE_TOLERANCE_M` is flagged. A site that now lies outside
its block (or the block is gone, or an exclusion covers it) is refused by
default (``revisit_changed="refuse"``) or left out and flagged (``"drop"``).
Blocks the earlier plan did not have get no sites and are flagged.
"""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING, Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from pyproj import CRS

from fieldplan.errors import DesignError, PlanDirError

if TYPE_CHECKING:
    from fieldplan.planning.plan import Plan
    from fieldplan.spec import PlanSpec

__all__ = ["revisit_plan", "SHAPE_TOLERANCE_M", "DESIGN_COLUMNS"]

#: A block whose boundary moved further than this (Hausdorff distance, metres)
#: has changed shape. Half a metre is finer than a hand-held GPS redraw and
#: coarser than rounding in file exports. # common practice, no source
SHAPE_TOLERANCE_M = 0.5

#: Point columns of the earlier plan that belong to the site and are carried over.
DESIGN_COLUMNS = ("row", "plant", "units")


#: Point statuses of sites sampled in the earlier round (fieldplan.field.mark); unused
#: spares and points marked inaccessible were not, and are not kept.
ACTIVE_STATUSES = ("selected", "replacement", "substitute")


def _site_table(previous: Plan) -> gpd.GeoDataFrame:
    points = previous.points
    if "status" in points.columns:
        status = points["status"].fillna("selected").astype(str)
        points = points[status.isin(ACTIVE_STATUSES).to_numpy()]
    if "sample_id" not in points.columns:
        raise PlanDirError("the earlier plan has no sample ids; re-plan it with this version of fieldplan")
    return points.reset_index(drop=True)


def _changed_blocks(old: gpd.GeoDataFrame, new: gpd.GeoDataFrame) -> dict[str, float]:
    """Blocks in both whose boundary moved more than the tolerance, with the distance moved."""
    old_geoms = old.set_index(old["block"].astype(str)).geometry
    names = new["block"].astype(str).to_numpy()
    both = np.isin(names, old_geoms.index)
    moved = shapely.hausdorff_distance(
        np.asarray(old_geoms.loc[names[both]].values, dtype=object),
        np.asarray(new.geometry.values[both], dtype=object),
    )
    return {str(n): float(d) for n, d in zip(names[both], moved, strict=True) if d > SHAPE_TOLERANCE_M}


def revisit_plan(
    blocks: gpd.GeoDataFrame,
    spec: PlanSpec,
    previous: Plan,
    *,
    seed: int,
    exclusions: gpd.GeoDataFrame | None = None,
    command: list[str] | None = None,
) -> Plan:
    """A plan of this round at the earlier plan's sites.

    Parameters
    ----------
    blocks : geopandas.GeoDataFrame
        This season's blocks (any metric CRS; they are brought into the earlier plan's).
    spec : PlanSpec
        This round's spec (its ``revisit_changed`` says what to do with sites
        whose block changed; its sample purpose gives the ids, depth and cores).
    previous : Plan
        The earlier plan (:func:`fieldplan.store.load_plan`).
    seed : int
        Seed of this round (its sample ids; sites do not move).

    Returns
    -------
    Plan
        Points with the earlier ``point_id`` and coordinates, new ``sample_id``
        and ``previous_sample_id``; flags on changed, new and emptied blocks.

    Raises
    ------
    DesignError
        With ``revisit_changed="refuse"``, when a site is now outside its block,
        in an exclusion, or its block is gone (the message names the sites).
    """
    from fieldplan.planning.plan import Plan, run_record, sample_areas
    from fieldplan.planning.stratum_designs import strata_labels
    from fieldplan.samples.purpose import apply_samples

    crs = CRS.from_user_input(previous.crs)
    if CRS.from_user_input(blocks.crs) != crs:
        blocks = blocks.to_crs(crs)
    if exclusions is None:
        exclusions = gpd.GeoDataFrame({"name": []}, geometry=[], crs=crs)
    elif CRS.from_user_input(exclusions.crs) != crs:
        exclusions = exclusions.to_crs(crs)
    sites = _site_table(previous)
    if CRS.from_user_input(sites.crs) != crs:  # pragma: no cover - a plan keeps one CRS
        sites = sites.to_crs(crs)

    names = blocks["block"].astype(str)
    position = pd.Index(names).get_indexer(sites["block"].astype(str))
    geoms = np.asarray(blocks.geometry.values, dtype=object)
    here = position >= 0
    inside = np.zeros(len(sites), dtype=bool)
    inside[here] = shapely.covers(geoms[position[here]], sites.geometry.values[here])
    if len(exclusions):
        inside &= ~shapely.intersects(shapely.union_all(exclusions.geometry.values), sites.geometry.values)
    lost = np.flatnonzero(~inside)
    if lost.size and spec.input.revisit_changed == "refuse":
        listed = ", ".join(sites["point_id"].astype(str).iloc[lost[:5]])
        more = f" and {lost.size - 5} more" if lost.size > 5 else ""
        raise DesignError(
            f"{lost.size} earlier site(s) ({listed}{more}) now lie outside their block, in an exclusion, "
            "or their block is gone; check the boundaries, or give --revisit-changed drop to leave them out"
        )

    changed = _changed_blocks(previous.blocks, blocks)
    kept = sites.iloc[np.flatnonzero(inside)].reset_index(drop=True)
    dropped = (
        sites.iloc[lost].groupby(sites["block"].astype(str).iloc[lost]).size() if lost.size else pd.Series()
    )

    out_blocks = blocks.copy()
    out_blocks["stratum"] = strata_labels(out_blocks, spec.size.strata_by)
    areas = sample_areas(out_blocks, edge_buffer=spec.edge_buffer, exclusions=exclusions)
    out_blocks["area_ha"] = shapely.area(geoms) / 10_000.0
    out_blocks["sampled_area_ha"] = shapely.area(areas) / 10_000.0
    counts = kept.groupby(kept["block"].astype(str)).size()
    out_blocks["n_points"] = names.map(counts).fillna(0).astype(int).to_numpy()
    earlier = set(previous.blocks["block"].astype(str))
    flags = []
    for name in names:
        notes = []
        if name not in earlier:
            notes.append("new block: no earlier sites, not sampled this round")
        if name in changed:
            notes.append(
                f"boundary moved up to {changed[name]:.1f} m since the earlier plan: check its sites"
            )
        if name in dropped.index:
            notes.append(f"{int(dropped[name])} earlier site(s) now outside the block or excluded: left out")
        flags.append("; ".join(notes))
    out_blocks["flags"] = flags

    strata = dict(zip(names, out_blocks["stratum"], strict=True))
    design = str(previous.params.get("design", "grid"))
    data: dict[str, Any] = {
        "point_id": kept["point_id"].astype(str).to_numpy(),
        "block": kept["block"].astype(str).to_numpy(),
        "stratum": kept["block"].astype(str).map(strata).to_numpy(),
        "design": design,
    }
    for column in DESIGN_COLUMNS:
        if column in kept.columns:
            data[column] = kept[column].to_numpy()
    data["previous_sample_id"] = kept["sample_id"].astype(str).to_numpy()
    data["site_note"] = np.where(kept["block"].astype(str).isin(list(changed)), "block boundary moved", "")
    points = gpd.GeoDataFrame(data, geometry=np.asarray(kept.geometry.values, dtype=object), crs=crs)
    if design == "clusters" and {"row", "plant", "units"} <= set(points.columns):
        from fieldplan.planning.stratum_designs import DEFAULT_INSTRUCTIONS, format_instructions

        template = spec.clusters.instructions or DEFAULT_INSTRUCTIONS
        points["instructions"] = format_instructions(template, points)

    notes = [
        *blocks.attrs.get("notes", []),
        f"revisit of the plan {previous.params.get('plan_id', '')} (seed {previous.params.get('seed')}): "
        f"{len(points)} of its {len(sites)} sites kept",
    ]
    meta = {
        **run_record(blocks, out_blocks, points, crs, seed=seed, command=command, notes=notes),
        "previous_plan_id": previous.params.get("plan_id"),
    }
    identity = {**spec.identity(), "seed": int(seed), "previous_plan_id": previous.params.get("plan_id")}
    plan = Plan(out_blocks, points, exclusions, crs, identity, meta)
    purposed = apply_samples(plan, spec.samples)
    params = {**spec.to_dict(), "seed": int(seed), "plan_id": purposed.params.get("plan_id")}
    if "spacing_m" in previous.params:
        params["spacing_m"] = previous.params["spacing_m"]
    layers = dict(purposed.layers)
    if "cores" in layers and "cores" in previous.layers:
        layers["cores"] = _earlier_cores(layers["cores"], previous.layers["cores"], crs)
    return replace(purposed, params=params, layers=layers)


def _earlier_cores(new: gpd.GeoDataFrame, old: pd.DataFrame, crs: CRS) -> gpd.GeoDataFrame:
    """This round's cores at the earlier cores' spots, where the earlier plan had them.

    Cores are matched by site and core number (by block for one composite per
    block); a core the earlier plan did not have keeps its new spot.
    """
    old = gpd.GeoDataFrame(old, geometry="geometry") if not isinstance(old, gpd.GeoDataFrame) else old
    if old.crs is not None and CRS.from_user_input(old.crs) != CRS.from_user_input(crs):
        old = old.to_crs(crs)

    def key(frame: pd.DataFrame) -> pd.Series:
        site = frame["point_id"].fillna("").astype(str)
        site = site.where(site != "", "block:" + frame["block"].astype(str))
        return site + "#" + frame["core"].astype(int).astype(str)

    spots = pd.Series(np.asarray(old.geometry.values, dtype=object), index=key(old).to_numpy())
    spots = spots[~spots.index.duplicated()]
    wanted = key(new)
    found = wanted.isin(spots.index).to_numpy()
    geoms = np.asarray(new.geometry.values, dtype=object).copy()
    geoms[found] = spots.loc[wanted[found]].to_numpy()
    out = new.copy()
    out = out.set_geometry(gpd.GeoSeries(geoms, index=new.index, crs=new.crs))
    return out
