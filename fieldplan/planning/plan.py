"""The Plan object and ``make_plan``, which runs a registered design over blocks.

``make_plan`` takes validated blocks (see :mod:`fieldplan.read`) and returns a
:class:`Plan`; writing it to a folder is :func:`fieldplan.store.write_plan`.
"""

from __future__ import annotations

import os
import shlex
import sys
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from pyproj import CRS

from fieldplan import __version__
from fieldplan.design.grid import cell_area, spacing_for_density
from fieldplan.errors import InvalidBlocksError
from fieldplan.field.substitutes import SUBSTITUTES_LAYER, substitutes_layer
from fieldplan.limits import check_point_budget
from fieldplan.planning.grid import grid_design
from fieldplan.planning.stratum_designs import STRATIFIED_DESIGNS, check_design_options, strata_labels
from fieldplan.planning.text_columns import bulk_points, is_text, join_text, repeat_text, zero_padded
from fieldplan.spec import PlanSpec, SpecDesignError, SpecError

__all__ = ["Plan", "PlanSpec", "make_plan", "sample_areas", "DESIGNS", "DEFAULT_MAX_POINTS"]

DEFAULT_MAX_POINTS = 10_000_000
START_MODES = ("field", "block")


@dataclass(frozen=True)
class Plan:
    """A sampling plan: blocks, points, exclusions and everything needed to reproduce it.

    Attributes
    ----------
    blocks : geopandas.GeoDataFrame
        One row per block in the local metric CRS, with ``block, stratum, variety,
        row_spacing_m, plant_spacing_m, row_bearing_deg, area_ha, sampled_area_ha,
        n_points, flags``.
    points : geopandas.GeoDataFrame
        One row per sample point with ``point_id, block, stratum, design`` and any
        design-specific columns.
    exclusions : geopandas.GeoDataFrame
        Areas kept free of samples (may be empty).
    crs : pyproj.CRS
        The local metric CRS of all three frames.
    params : dict
        The plan's spec as :meth:`fieldplan.spec.PlanSpec.to_dict` gives it, with
        ``seed``, ``plan_id`` and (grids) ``spacing_m``, the spacing used.
    meta : dict
        Manifest: version, command, seed, input file and its SHA-256, CRS, time, counts.
    layers : dict
        Further layers later stages add (routes, cores, results...), by name.
    """

    blocks: gpd.GeoDataFrame
    points: gpd.GeoDataFrame
    exclusions: gpd.GeoDataFrame
    crs: CRS
    params: dict
    meta: dict
    layers: dict[str, gpd.GeoDataFrame | pd.DataFrame] = field(default_factory=dict)

    def summary(self) -> pd.DataFrame:
        """Per-block table: ``block, area_ha, sampled_area_ha, n_points, points_per_ha, flags``."""
        b = self.blocks
        out = pd.DataFrame(
            {
                "block": b["block"].to_numpy(),
                "area_ha": b["area_ha"].round(4).to_numpy(),
                "sampled_area_ha": b["sampled_area_ha"].round(4).to_numpy(),
                "n_points": b["n_points"].astype(int).to_numpy(),
            }
        )
        out["points_per_ha"] = (out["n_points"] / out["area_ha"]).round(4)
        extra = [c for c in ("stratum", "n_target_exact", "n_allocated", "n_spares") if c in b.columns]
        for column in extra:
            out[column] = b[column].to_numpy()
        out["flags"] = b["flags"].to_numpy()
        return out

    @property
    def seed(self) -> int:
        return int(self.params["seed"])

    @property
    def spec(self) -> PlanSpec:
        """The plan's specification, rebuilt from ``params`` (plans of older versions too)."""
        return PlanSpec.from_dict(self.params, strict=False)

    def explore(self, **kwargs: Any) -> Any:
        """The plan's map as a ``folium.Map`` for notebooks (see :func:`fieldplan.explore.explore`)."""
        from fieldplan.explore import explore

        return explore(self, **kwargs)


def _utc_now() -> str:
    # SOURCE_DATE_EPOCH makes the manifest reproducible too (reproducible-builds convention).
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    moment = datetime.fromtimestamp(int(epoch), UTC) if epoch else datetime.now(UTC)
    return moment.replace(microsecond=0).isoformat().replace("+00:00", "Z")


def sample_areas(
    blocks: gpd.GeoDataFrame,
    *,
    edge_buffer: float = 0.0,
    exclusions: gpd.GeoDataFrame | None = None,
    exclusion_union: Any = None,
) -> np.ndarray:
    """Each block minus its inward edge buffer (headland) and minus exclusions.

    ``exclusion_union``, the union of the exclusions' geometries when the caller
    has it already, saves building it again.

    Returns an object array of (possibly empty) polygons aligned with ``blocks``.
    """
    if edge_buffer < 0:
        raise SpecError("edge_buffer", f"{{edge_buffer}} must be zero or positive metres, got {edge_buffer}")
    geoms = blocks.geometry.values
    areas = shapely.buffer(geoms, -edge_buffer, join_style="mitre") if edge_buffer > 0 else geoms
    if exclusions is not None and len(exclusions):
        union = (
            exclusion_union if exclusion_union is not None else shapely.union_all(exclusions.geometry.values)
        )
        areas = shapely.difference(areas, union)
    return np.asarray(areas, dtype=object)


#: Design functions by name (the registry is :data:`fieldplan.spec.DESIGNS`).
DESIGNS: dict[str, Callable] = {"grid": grid_design, **STRATIFIED_DESIGNS}


def _point_ids(block_column: pd.Series, codes: np.ndarray | None = None) -> Any:
    """``BLOCK-NNN``: the block and the point's number within it (in table order), as a text column.

    ``codes``, one whole number per distinct block (e.g. the block's row), saves finding them.
    """
    if codes is None:
        codes, _ = pd.factorize(block_column)
    if (codes < 0).any():  # a missing block: numbered as pandas' groupby numbers it
        counts = block_column.groupby(block_column, sort=False).cumcount() + 1
        width = max(3, len(str(int(counts.max())))) if len(counts) else 3
        return (block_column.astype(str) + "-" + counts.astype(str).str.zfill(width)).to_numpy()
    # Number within the block: position in a stable sort by block, less the block's first position.
    order = np.argsort(codes, kind="stable")
    sorted_codes = codes[order]
    first = np.searchsorted(sorted_codes, sorted_codes, side="left")
    counts = np.empty(codes.size, dtype=np.int64)
    counts[order] = np.arange(codes.size) - first + 1
    width = max(3, len(str(int(counts.max())))) if counts.size else 3
    return join_text([block_column.astype(str), "-", zero_padded(counts, width)], codes.size)


def _column(series: pd.Series) -> Any:
    """A column to carry into another frame as it is: text and numbers without a round trip."""
    dtype = series.dtype
    if is_text(dtype) or (isinstance(dtype, np.dtype) and dtype.kind in "biuf"):
        return series.array
    return series.to_numpy()


def _strata_of(table: pd.DataFrame, out_blocks: pd.DataFrame) -> tuple[np.ndarray | None, Any]:
    """Index into ``out_blocks`` of each point's block, and each point's stratum."""
    names = pd.Index(out_blocks["block"])
    if names.is_unique:
        index = names.get_indexer(table["block"])
        stratum = out_blocks["stratum"]
        if (index >= 0).all() and is_text(stratum.dtype):
            return index, stratum.array.take(index)
    strata = dict(zip(out_blocks["block"], out_blocks["stratum"], strict=True))
    return None, table["block"].map(strata).to_numpy()


def _run_params(spec: PlanSpec, seed: int) -> dict:
    """The parameters the design functions and engines read, from a checked spec."""
    grid, size, clusters = spec.grid, spec.size, spec.clusters
    spacing = grid.spacing
    if spec.design == "grid" and spacing is None:
        spacing = spacing_for_density(size.per_ha, grid.grid_layout)
    run = {
        "design": spec.design,
        "seed": int(seed),
        "spacing": float(spacing) if spacing is not None else None,
        "per_ha": size.per_ha,
        "layout": grid.grid_layout,
        "start": grid.random_start,
        "angle": grid.angle,
        "max_points": spec.scale.max_points,
        "spares": spec.replacements.spares,
    }
    if spec.design == "clhs":
        run["design_options"] = {
            "covariates": [c.strip() for c in (size.covariates or "").split(",") if c.strip()],
            "n": size.n,
            "cell": size.covariate_cell,
            "clhs_iterations": size.clhs_iterations,
            "cost": size.cost_covariate,
        }
    elif spec.design != "grid":
        options = {
            "per_block": size.per_block,
            "per_ha": size.per_ha,
            "n": size.n,
            "allocation": size.allocation,
            "size_field": size.size_field,
            # With zones, each zone's covariate SD stands in for the target's (fieldplan.zones_plan).
            "sd_field": size.sd_field or ("zone_sd" if size.zones else None),
            "cost_field": size.cost_field,
            "min_per_stratum": size.min_per_stratum,
            "candidates": size.candidates,
        }
        if spec.design == "clusters":
            options.update(
                target_units=clusters.target_units,
                units_per_cluster=clusters.plants_per_cluster,
                skip_row_ends=clusters.skip_row_ends,
                skip_border_rows=clusters.skip_border_rows,
                instructions=clusters.instructions,
            )
        run["design_options"] = check_design_options(spec.design, options)
    return run


def _as_spec(spec: PlanSpec | Mapping | None, options: dict) -> tuple[PlanSpec, object]:
    """The spec to plan with, and a rows frame passed the old way (in ``design_options``)."""
    if options:
        if spec is not None:
            raise TypeError("make_plan takes a spec or keyword options, not both")
        rows = (options.get("design_options") or {}).get("rows")
        return PlanSpec.from_options(**options), rows
    if spec is None:
        raise SpecError("spacing", "give a spec, e.g. PlanSpec.from_dict({{'spacing': 40}})")
    if isinstance(spec, PlanSpec):
        return spec, None
    return PlanSpec.from_dict(spec), None


def run_record(
    blocks: gpd.GeoDataFrame,
    out_blocks: gpd.GeoDataFrame,
    points: gpd.GeoDataFrame,
    crs: CRS,
    *,
    seed: int,
    command: list[str] | None,
    notes: list,
) -> dict:
    """What the manifest records of a run: version, command, seed, input file, CRS, time,
    counts and notes (``make_plan`` and ``plan --revisit`` both)."""
    return {
        "fieldplan_version": __version__,
        "command": shlex.join(command if command is not None else sys.argv),
        "seed": int(seed),
        "input_file": blocks.attrs.get("source"),
        "input_sha256": blocks.attrs.get("sha256"),
        "crs": crs.to_string(),
        "crs_name": crs.name,
        "created_utc": _utc_now(),
        "counts": {"blocks": int(len(out_blocks)), "points": int(len(points))},
        "notes": list(notes),
    }


def make_plan(
    blocks: gpd.GeoDataFrame,
    spec: PlanSpec | dict | None = None,
    *,
    seed: int = 0,
    exclusions: gpd.GeoDataFrame | None = None,
    rows: gpd.GeoDataFrame | None = None,
    command: list[str] | None = None,
    progress: Callable[[int, int], None] | None = None,
    previous: Plan | None = None,
    **options: Any,
) -> Plan:
    """Plan samples over blocks.

    Parameters
    ----------
    blocks : geopandas.GeoDataFrame
        Blocks in a metric CRS with a ``block`` column: :func:`fieldplan.read.read_blocks`
        or :func:`fieldplan.prepare_blocks`.
    spec : PlanSpec or dict
        What to plan (:class:`fieldplan.spec.PlanSpec`, or its flat dict, e.g. a
        manifest's ``parameters`` or a recipe).
    seed : int
        Seed of every random choice; the same inputs, spec and seed give the same plan.
    exclusions : geopandas.GeoDataFrame, optional
        Polygons kept free of samples, in the blocks' CRS (the spec's ``exclude``
        names the file the CLI read them from).
    rows : geopandas.GeoDataFrame, optional
        Mapped row lines for ``design="clusters"`` (the spec's ``rows`` names their file).
    command : list of str, optional
        Command line recorded in the manifest (default ``sys.argv``).
    progress : callable, optional
        ``progress(done, total)`` as blocks or strata are planned.
    previous : Plan, optional
        The earlier plan to revisit (default: loaded from the spec's ``revisit``
        folder, if it names one): its sites are kept, see :mod:`fieldplan.revisit`.
    **options
        The keyword options ``make_plan`` took before the spec (``design``,
        ``spacing``, ``per_ha``, ``layout``, ``start``, ``angle``, ``edge_buffer``,
        ``max_points``, ``design_options``, ``samples``, ``spares``,
        ``substitute``, ``engine``, ``scheduler``): still accepted, and turned
        into a spec with :meth:`fieldplan.spec.PlanSpec.from_options`.

    Returns
    -------
    Plan
        ``params`` holds ``spec.to_dict()`` with the ``seed``, the plan's code
        ``plan_id`` and, for grids, the spacing used ``spacing_m``.
    """
    from fieldplan.notebook import check_plannable

    check_plannable(blocks)  # degrees or unnamed blocks would give a plan that only looks right
    spec, legacy_rows = _as_spec(spec, options)
    rows = rows if rows is not None else legacy_rows
    read = blocks.attrs.get("read_params") or {}
    if read and not spec.input.columns and spec.input.length_unit == "m":
        # Blocks read with a column mapping or unit: the plan's parameters (and a
        # recipe made from them) carry it, so next season reads the file the same way.
        spec = spec.replace(**read)
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer) or seed < 0:
        raise SpecError("seed", f"{{seed}} must be a non-negative integer, got {seed!r}")
    if len(blocks) == 0:
        raise InvalidBlocksError("no blocks to plan")
    if previous is not None or spec.input.revisit:
        from fieldplan.revisit import revisit_plan

        if previous is None:
            from fieldplan.store import load_plan

            previous = load_plan(spec.input.revisit)
        return revisit_plan(blocks, spec, previous, seed=int(seed), exclusions=exclusions, command=command)
    if rows is not None and spec.design != "clusters":
        raise SpecError("rows", "{rows} applies to {design} clusters only")
    design = spec.design
    run = _run_params(spec, seed)
    spacing, layout, max_points = run["spacing"], run["layout"], run["max_points"]
    edge_buffer = spec.edge_buffer
    strata_by = spec.size.strata_by

    crs = CRS.from_user_input(blocks.crs)
    if exclusions is None:
        exclusions = gpd.GeoDataFrame({"name": []}, geometry=[], crs=crs)
    total_area = float(shapely.area(blocks.geometry.values).sum())
    expected = total_area / cell_area(spacing, layout) if design == "grid" else 0.0
    if expected > max_points:
        raise SpecDesignError(
            "spacing",
            f"the grid would create about {expected:,.0f} points, more than the limit of {max_points:,}; "
            "use a wider {spacing} or a lower {per_ha} (or raise {max_points})",
        )
    check_point_budget(spec, blocks, max_points=max_points)  # every other design, before drawing
    exclusion_union = shapely.union_all(exclusions.geometry.values) if len(exclusions) else None
    areas = sample_areas(
        blocks, edge_buffer=edge_buffer, exclusions=exclusions, exclusion_union=exclusion_union
    )
    run["rows_frame"] = rows
    if spec.size.zones:
        # Block-zone pieces become the units the design samples (fieldplan.zones_plan).
        from fieldplan.zones import read_zones
        from fieldplan.zones_plan import ZONE_STRATUM_FIELD, split_by_zones

        blocks, areas, zone_notes = split_by_zones(
            blocks,
            areas,
            read_zones(spec.size.zones, crs=crs),
            across=spec.size.strata_across_blocks,
            sd_covariate=spec.size.zone_sd,
            source=str(spec.size.zones),
        )
        blocks.attrs["notes"] = [*blocks.attrs.get("notes", []), *zone_notes]
        if strata_by in (None, "zone"):
            strata_by = ZONE_STRATUM_FIELD
    if strata_by is not None or "stratum" not in blocks.columns:
        blocks = blocks.copy()
        blocks["stratum"] = strata_labels(blocks, strata_by)
    engine, scheduler = spec.scale.engine, spec.scale.scheduler
    if engine == "local" and scheduler is None:
        table, flags = spec.design_info.load()(blocks, areas, run, exclusion_union, progress)
    else:
        from fieldplan.planning.engine import run_design

        table, flags = run_design(
            design, blocks, areas, run, exclusion_union, progress, engine=engine, scheduler=scheduler
        )

    out_blocks = blocks.copy()
    if "stratum" not in out_blocks.columns:
        out_blocks["stratum"] = out_blocks["block"]
    out_blocks["area_ha"] = shapely.area(blocks.geometry.values) / 10_000.0
    out_blocks["sampled_area_ha"] = shapely.area(areas) / 10_000.0
    is_spare = (
        table["status"].eq("spare") if "status" in table.columns else pd.Series(False, index=table.index)
    )
    owner, stratum = _strata_of(table, out_blocks)
    if owner is not None:
        spare = is_spare.to_numpy(dtype=bool)
        out_blocks["n_points"] = np.bincount(owner[~spare], minlength=len(out_blocks)).astype(int)
        if spec.replacements.spares:
            out_blocks["n_spares"] = np.bincount(owner[spare], minlength=len(out_blocks)).astype(int)
    else:
        counts = table[~is_spare].groupby("block").size()
        out_blocks["n_points"] = out_blocks["block"].map(counts).fillna(0).astype(int)
        if spec.replacements.spares:
            n_spare = table[is_spare].groupby("block").size()
            out_blocks["n_spares"] = out_blocks["block"].map(n_spare).fillna(0).astype(int)
    allocation = table.attrs.get("strata")
    if allocation is not None:
        # A stratum spanning several blocks repeats its allocation on each of them.
        by = allocation.set_index("stratum")
        key = out_blocks["stratum"].astype(str)
        out_blocks["n_target_exact"] = key.map(by["n_target_exact"]).to_numpy()
        out_blocks["n_allocated"] = key.map(by["n_allocated"]).astype(int).to_numpy()
    emptied = shapely.is_empty(areas).tolist() if edge_buffer > 0 else [False] * len(flags)
    buffer_flags = [
        ["edge buffer wider than the block: sampled without it"]
        if gone and not any("edge buffer" in f or "not sampled" in f for f in fl)
        else []
        for gone, fl in zip(emptied, flags, strict=True)
    ]
    out_blocks["flags"] = ["; ".join(f + b) for f, b in zip(flags, buffer_flags, strict=True)]

    points = gpd.GeoDataFrame(
        {
            "point_id": _point_ids(table["block"], owner),
            "block": _column(table["block"]),
            "stratum": stratum,
            "design": repeat_text(design, len(table)),
            **{c: _column(table[c]) for c in table.columns if c not in ("block", "x", "y")},
        },
        geometry=bulk_points(table["x"].to_numpy(), table["y"].to_numpy()),
        crs=crs,
    )
    meta = run_record(
        blocks,
        out_blocks,
        points,
        crs,
        seed=seed,
        command=command,
        notes=[*blocks.attrs.get("notes", []), *table.attrs.get("notes", [])],
    )
    # The plan's code (in every sample id) comes from what decides the points only,
    # so the engine or the output formats never change the ids.
    identity = {**spec.identity(), "seed": int(seed)}
    if blocks.attrs.get("renamed_columns"):
        meta["renamed_columns"] = dict(blocks.attrs["renamed_columns"])
    if blocks.attrs.get("source_crs"):
        meta["input_crs"] = blocks.attrs["source_crs"]
    plan = Plan(out_blocks, points, exclusions, crs, identity, meta)
    # Purpose stage: sample ids, depth, soil cores or ripeness instructions.
    from fieldplan.samples.purpose import apply_samples

    purposed = apply_samples(plan, spec.samples)
    params = {**spec.to_dict(), "seed": int(seed), "plan_id": purposed.params.get("plan_id")}
    if design == "grid":
        params["spacing_m"] = round(float(spacing), 6)
    plan = _keep_design_columns(plan, replace(purposed, params=params))
    if spec.replacements.substitute == "within-cell":
        # From the design's positions: a soil point the core buffer moved inward keeps the
        # substitute of its own lattice cell.
        plan.layers[SUBSTITUTES_LAYER] = _grid_substitutes(points, blocks, areas, {**params, **run})
    return plan


def _grid_substitutes(
    points: gpd.GeoDataFrame, blocks: pd.DataFrame, areas: np.ndarray, params: dict
) -> gpd.GeoDataFrame:
    """One within-cell substitute per grid point at its design position (see fieldplan.field.substitutes)."""
    index = pd.Index(blocks["block"]).get_indexer(points["block"])
    if params["angle"] == "rows":
        bearing = blocks["row_bearing_deg"].astype(float).fillna(0.0).to_numpy()[index]
    else:
        bearing = np.full(len(index), float(params["angle"]))
    return substitutes_layer(
        points,
        np.asarray(areas, dtype=object)[index],
        bearing,
        seed=params["seed"],
        spacing=params["spacing_m"],
        layout=params["layout"],
    )


def _keep_design_columns(designed: Plan, purposed: Plan) -> Plan:
    """Carry the design's per-point ``units`` and ``instructions`` through the purpose stage.

    The clusters design says how many units to take at each picked plant and
    where; a crop profile's instructions (what a unit is, how to pick) follow
    the design's, and the design's count per point wins over the profile's
    per-sample text, which its instructions repeat.
    """
    points = purposed.points
    changed = False
    for column in ("units", "instructions"):
        if column not in designed.points.columns:
            continue
        mine = _column(designed.points[column])
        if column in points.columns and column == "instructions":
            mine = join_text(
                [designed.points[column].astype(str), "; ", points[column].astype(str)], len(points)
            )
        if not changed:
            points = points.copy(deep=False)
            changed = True
        points[column] = mine
    return replace(purposed, points=points) if changed else purposed
