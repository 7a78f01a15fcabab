"""The sampling purpose stage: sample ids, depth, soil cores, ripeness instructions.

:func:`apply_purpose` runs after a design has placed the plan's points. It adds
to every point record ``purpose``, ``depth_cm`` and ``sample_id`` (and for
ripeness plans ``per_sample`` and ``instructions`` from a crop profile), and for soil
plans a ``cores`` layer: where each core of each composite sample is taken.
"""

from __future__ import annotations

import re
from dataclasses import replace

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from fieldplan.errors import DesignError, OptionError
from fieldplan.rng import stream
from fieldplan.samples.cores import (
    DEFAULT_BUFFER_M,
    DEFAULT_CORE_RADIUS_M,
    DEFAULT_CORES,
    DEFAULT_DEPTH_CM,
    disc_cores,
    usable_core_area,
    zigzag_cores,
)
from fieldplan.samples.ids import make_sample_ids, plan_code
from fieldplan.samples.profiles import load_profile

__all__ = ["PURPOSES", "COMPOSITES", "DEFAULT_PROFILE", "apply_purpose", "resolve_purpose", "parse_depth"]

PURPOSES = ("general", "soil", "ripeness")
COMPOSITES = ("cell", "zone")
DEFAULT_PROFILE = "wine-grapes"
# "0-15", "0-15cm", "0 - 15 cm", "0–15 cm" (en dash): the unit is optional but must be cm.
_DEPTH = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*(?:cm)?\s*[-\u2013]\s*(\d+(?:\.\d+)?)\s*(?:cm)?\s*$", re.I)
_MAX_CORES = 200
_OWN_PARAMS = (
    "purpose",
    "cores",
    "core_radius_m",
    "composite",
    "core_buffer_m",
    "depth_cm",
    "crop_profile",
    "plan_id",
)
# A design's own ``units`` column (clusters) is left alone. ``instructions`` is
# this stage's: make_plan puts a design's instructions back in front of it.
_OWN_COLUMNS = ("purpose", "depth_cm", "sample_id", "per_sample", "instructions")


def parse_depth(text: str | None) -> str:
    """Check a depth range in cm, e.g. ``"0-15"`` or ``"0-15cm"``; returns it normalised ('' for none).

    Examples
    --------
    >>> parse_depth("0-15cm"), parse_depth(" 15 - 30 cm "), parse_depth("0\u201315")
    ('0-15', '15-30', '0-15')
    """
    if text is None or str(text).strip() == "":
        return ""
    match = _DEPTH.match(str(text))
    if not match:
        raise OptionError(f"--depth takes a range in cm such as 0-15, 0-15cm or 15-30; got {text!r}")
    top, bottom = (float(g) for g in match.groups())
    if not bottom > top:
        raise OptionError(f"--depth {text!r}: the bottom must be deeper than the top")
    return f"{top:g}-{bottom:g}"


def _only_for_soil(purpose: str, **given) -> None:
    named = [name for name, value in given.items() if value is not None]
    if purpose != "soil" and named:
        options = ", ".join("--" + n.replace("_", "-") for n in named)
        raise OptionError(f"{options} only apply to --purpose soil (got --purpose {purpose})")


def _exclusion_geoms(plan) -> np.ndarray:
    ex = plan.exclusions
    return np.asarray(ex.geometry.values, dtype=object) if ex is not None and len(ex) else np.empty(0, object)


def _soil_cores(plan, points, *, n, radius, composite, buffer_m, depth):
    """Cores layer and per-block notes for a soil plan."""
    seed = plan.seed
    exclusions = _exclusion_geoms(plan)
    frames, notes = [], {}
    groups = points.groupby(points["block"].astype(str), sort=False).indices
    for row in plan.blocks.itertuples(index=False):
        block = str(row.block)
        if block not in groups:
            continue
        # Only exclusions within reach of this block can cut its allowed area.
        near = exclusions[shapely.dwithin(exclusions, row.geometry, 1.01 * buffer_m + 1.0)]
        try:
            area, used = usable_core_area(row.geometry, near, buffer_m=buffer_m)
        except DesignError as err:
            raise DesignError(f"block {block}: {err}") from None
        block_notes = []
        if used < buffer_m:
            block_notes.append(f"cores: edge buffer cut to {used:g} m (block too small for {buffer_m:g} m)")
        pts = points.iloc[groups[block]]
        if composite == "cell":
            centres = shapely.get_coordinates(pts.geometry.values)
            xy, moved = disc_cores(centres, n=n, radius=radius, area=area, rng=stream(seed, "cores", block))
            if moved.any():
                block_notes.append(f"cores: {int(moved.sum())} moved to the nearest allowed spot")
            sample = np.repeat(pts["sample_id"].to_numpy(), n)
            point = np.repeat(pts["point_id"].to_numpy(), n)
            xy = xy.reshape(-1, 2)
            core = np.tile(np.arange(1, n + 1), len(pts))
        else:
            xy = zigzag_cores(row.geometry, n=n, area=area, rng=stream(seed, "zone-cores", block))
            sample = np.repeat(pts["sample_id"].iloc[0], n)
            point = np.repeat("", n)
            core = np.arange(1, n + 1)
        frames.append(
            pd.DataFrame(
                {
                    "sample_id": sample,
                    "core": core,
                    "block": block,
                    "point_id": point,
                    "composite": composite,
                    "depth_cm": depth,
                    "x": xy[:, 0],
                    "y": xy[:, 1],
                }
            )
        )
        if block_notes:
            notes[block] = block_notes
    table = (
        pd.concat(frames, ignore_index=True)
        if frames
        else pd.DataFrame(
            columns=["sample_id", "core", "block", "point_id", "composite", "depth_cm", "x", "y"]
        )
    )
    table["core_id"] = (
        table["sample_id"].astype(str) + "/" + table["core"].astype(int).astype(str).str.zfill(2)
    )
    cores = gpd.GeoDataFrame(
        table.drop(columns=["x", "y"])[
            ["core_id", "sample_id", "core", "block", "point_id", "composite", "depth_cm"]
        ],
        geometry=shapely.points(table["x"].to_numpy(float), table["y"].to_numpy(float)),
        crs=plan.crs,
    )
    return cores, notes


def _edge_notes(plan, points, profile) -> dict[str, list[str]]:
    """Blocks with points closer to the edge than the rows and plants the profile skips.

    The strip is ``skip_border_rows`` row spacings or ``skip_end_plants`` plant
    spacings, whichever is wider (row direction is not needed for this check).
    """
    blocks = plan.blocks
    rows = blocks.get("row_spacing_m", pd.Series(np.nan, index=blocks.index)).astype(float)
    plants = blocks.get("plant_spacing_m", pd.Series(np.nan, index=blocks.index)).astype(float)
    strip = np.fmax(profile.skip_border_rows * rows.to_numpy(), profile.skip_end_plants * plants.to_numpy())
    known = np.isfinite(strip) & (strip > 0)
    if not known.any() or len(points) == 0:
        return {}
    names = blocks["block"].astype(str).to_numpy()
    owner = pd.Index(names).get_indexer(points["block"].astype(str))
    ok = owner >= 0
    near = np.zeros(len(points), dtype=bool)
    edges = shapely.boundary(blocks.geometry.values)
    dist = shapely.distance(points.geometry.values[ok], edges[owner[ok]])
    near[ok] = known[owner[ok]] & (dist < strip[owner[ok]])
    counts = np.bincount(owner[near], minlength=len(blocks))
    return {
        names[i]: [
            f"ripeness: {counts[i]} point(s) within {strip[i]:.1f} m of the edge (border rows or row "
            f"ends the crop profile skips); re-plan with --edge-buffer {strip[i]:g} or sample one "
            "row or plant further in"
        ]
        for i in np.flatnonzero(counts)
    }


def _profile_instructions(plan, points, profile) -> tuple[np.ndarray, list[str]]:
    """The crop profile's instruction per point, from the plan's effective options.

    A clusters plan leaves out the row ends and border rows of its own options
    (not the profile's) and gathers each sample from ``units`` plants, so its
    text says those numbers and how much to take from each plant for the total
    to land in the profile's range. Returns the texts and plan notes where the
    plan cannot follow the profile.
    """
    if plan.params.get("design") != "clusters" or "units" not in points.columns:
        return np.full(len(points), profile.instructions, dtype=object), []
    # Plans keep their options flat (fieldplan.spec); older plans under design_options.
    opts = plan.params.get("design_options") or plan.params
    ends = int(opts.get("skip_row_ends") or 0)
    border = int(opts.get("skip_border_rows") or 0)
    plants = points["units"].to_numpy(dtype=np.int64)
    sizes, which = np.unique(plants, return_inverse=True)
    texts = np.array(
        [
            profile.instructions_for(plants=int(k), skip_end_plants=ends, skip_border_rows=border)
            for k in sizes
        ],
        dtype=object,
    )
    notes = [w for w in (profile.cluster_warning(int(k)) for k in sizes) if w]
    if ends < profile.skip_end_plants or border < profile.skip_border_rows:
        notes.append(
            f"crop profile {profile.name} skips {profile.skip_end_plants} end plant(s) per row and "
            f"{profile.skip_border_rows} border row(s); this plan leaves out {ends} and {border} "
            f"(--skip-row-ends, --skip-border-rows); re-plan with --skip-row-ends "
            f"{max(ends, profile.skip_end_plants)} --skip-border-rows "
            f"{max(border, profile.skip_border_rows)} to follow the profile"
        )
    return texts[which.reshape(-1)] if len(points) else np.empty(0, dtype=object), notes


def _with_notes(blocks: gpd.GeoDataFrame, notes: dict[str, list[str]]) -> gpd.GeoDataFrame:
    if not notes:
        return blocks
    out = blocks.copy()
    old = out["flags"].fillna("").astype(str) if "flags" in out else pd.Series("", index=out.index)
    extra = out["block"].astype(str).map(lambda b: "; ".join(notes.get(b, [])))
    out["flags"] = np.where((old != "") & (extra != ""), old + "; " + extra, np.where(old != "", old, extra))
    return out


def resolve_purpose(
    *,
    purpose: str = "general",
    cores: int | None = None,
    core_radius: float | None = None,
    composite: str | None = None,
    depth: str | None = None,
    crop_profile: str | None = None,
    core_buffer: float | None = None,
) -> dict:
    """Check the purpose options and fill in defaults, without touching a plan.

    Call it before a long design run so a bad option fails at once. Returns
    ``purpose, cores, core_radius_m, composite, core_buffer_m, depth_cm, profile``
    (soil-only values are None for other purposes; ``profile`` is a
    :class:`~fieldplan.samples.profiles.CropProfile` for ripeness plans).
    """
    if purpose not in PURPOSES:
        raise OptionError(f"--purpose must be one of {', '.join(PURPOSES)}; got {purpose!r}")
    _only_for_soil(
        purpose, cores=cores, core_radius=core_radius, composite=composite, core_buffer=core_buffer
    )
    if purpose != "ripeness" and crop_profile is not None:
        raise OptionError(f"--crop-profile only applies to --purpose ripeness (got --purpose {purpose})")
    out = {"purpose": purpose, "cores": None, "core_radius_m": None, "composite": None}
    out.update(core_buffer_m=None, profile=None)
    if purpose == "soil":
        n = DEFAULT_CORES if cores is None else int(cores)
        if not 1 <= n <= _MAX_CORES:
            raise OptionError(f"--cores must be between 1 and {_MAX_CORES}, got {cores}")
        radius = DEFAULT_CORE_RADIUS_M if core_radius is None else float(core_radius)
        if not radius > 0:
            raise OptionError(f"--core-radius must be positive metres, got {core_radius}")
        buffer_m = DEFAULT_BUFFER_M if core_buffer is None else float(core_buffer)
        if not buffer_m >= 0:
            raise OptionError(f"--core-buffer must be zero or positive metres, got {core_buffer}")
        composite = composite or "cell"
        if composite not in COMPOSITES:
            raise OptionError(f"--composite must be one of {', '.join(COMPOSITES)}; got {composite!r}")
        out.update(cores=n, core_radius_m=radius, composite=composite, core_buffer_m=buffer_m)
        out["depth_cm"] = parse_depth(depth if depth is not None else "{:g}-{:g}".format(*DEFAULT_DEPTH_CM))
    else:
        out["depth_cm"] = parse_depth(depth)
    if purpose == "ripeness":
        out["profile"] = load_profile(crop_profile or DEFAULT_PROFILE)
    return out


def apply_purpose(
    plan,
    *,
    purpose: str = "general",
    cores: int | None = None,
    core_radius: float | None = None,
    composite: str | None = None,
    depth: str | None = None,
    crop_profile: str | None = None,
    core_buffer: float | None = None,
):
    """Add sample ids and purpose columns (and soil cores) to a plan.

    Parameters
    ----------
    plan : fieldplan.plan.Plan
        A plan whose design has placed its points.
    purpose : {"general", "soil", "ripeness"}, keyword-only
    cores : int, optional, keyword-only
        Cores per composite (soil; default 16, trade advice 15-20).
    core_radius : float, optional, keyword-only
        Metres around each point within which its cores lie (soil, cell composites; default 10).
    composite : {"cell", "zone"}, optional, keyword-only
        ``cell``: one composite per plan point, cores around it. ``zone``: one
        composite per block, cores along a zig-zag over the block's long axis.
    depth : str, optional, keyword-only
        Depth range in cm (soil default ``0-15``).
    crop_profile : str, optional, keyword-only
        Shipped profile name or TOML file (ripeness; default ``wine-grapes``).
    core_buffer : float, optional, keyword-only
        Metres kept from block edges and exclusions (soil; default 30).

    Returns
    -------
    Plan
        A new plan; ``plan`` is not changed.
    """
    opts = resolve_purpose(
        purpose=purpose,
        cores=cores,
        core_radius=core_radius,
        composite=composite,
        depth=depth,
        crop_profile=crop_profile,
        core_buffer=core_buffer,
    )
    n, radius, buffer_m = opts["cores"], opts["core_radius_m"], opts["core_buffer_m"]
    composite, depth_text, profile = opts["composite"], opts["depth_cm"], opts["profile"]

    # A plan may pass through here twice (library use): start from its design alone.
    params = {k: v for k, v in plan.params.items() if k not in _OWN_PARAMS}
    params["purpose"] = purpose
    if purpose == "soil":
        params.update(
            cores=n, core_radius_m=radius, composite=composite, core_buffer_m=buffer_m, depth_cm=depth_text
        )
    elif depth_text:
        params["depth_cm"] = depth_text
    if profile is not None:
        params["crop_profile"] = profile.name
    code = plan_code(plan.meta.get("input_sha256"), params)
    params["plan_id"] = code

    points = plan.points.drop(columns=[c for c in _OWN_COLUMNS if c in plan.points.columns])
    points["purpose"] = purpose
    points["depth_cm"] = depth_text
    if purpose == "soil" and composite == "zone":
        blocks = points["block"].astype(str)
        order = pd.unique(blocks)
        ids = dict(zip(order, make_sample_ids(len(order), code=code), strict=True))
        points["sample_id"] = blocks.map(ids).to_numpy()
    else:
        points["sample_id"] = make_sample_ids(len(points), code=code)
    profile_notes: list[str] = []
    if profile is not None:
        points["per_sample"] = profile.units_text
        points["instructions"], profile_notes = _profile_instructions(plan, points, profile)

    layers = dict(plan.layers)
    blocks = plan.blocks
    if purpose == "soil":
        layers["cores"], notes = _soil_cores(
            plan, points, n=n, radius=radius, composite=composite, buffer_m=buffer_m, depth=depth_text
        )
        blocks = _with_notes(plan.blocks, notes)
    else:
        layers.pop("cores", None)
    if profile is not None and plan.params.get("design") != "clusters":
        # The clusters design skips border rows and row ends itself (its own options).
        blocks = _with_notes(blocks, _edge_notes(plan, points, profile))
    meta = dict(plan.meta)
    if profile_notes:
        meta["notes"] = [*meta.get("notes", []), *profile_notes]
    if "counts" in meta:
        meta["counts"] = {**meta["counts"], "samples": int(points["sample_id"].nunique())}
        if "cores" in layers:
            meta["counts"]["cores"] = int(len(layers["cores"]))
    return replace(plan, blocks=blocks, points=points, params=params, meta=meta, layers=layers)
