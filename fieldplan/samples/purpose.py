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
from fieldplan.planning.text_columns import (
    bulk_points,
    join_text,
    repeat_text,
    take_text,
    to_text,
    zero_padded,
)
from fieldplan.rng import streams
from fieldplan.samples.ids import make_sample_ids, plan_code, sample_id_bytes

__all__ = [
    "apply_samples",
    "check_samples",
    "PURPOSES",
    "COMPOSITES",
    "DEFAULT_PROFILE",
    "apply_purpose",
    "core_status",
    "field_cores",
    "with_notes",
    "resolve_purpose",
    "parse_depth",
]

PURPOSES = ("general", "soil", "ripeness")
COMPOSITES = ("cell", "block")
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
_OWN_COLUMNS = ("purpose", "depth_cm", "sample_id", "per_sample", "instructions", "moved_m")


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


_CORE_COLUMNS = ["core_id", "sample_id", "core", "block", "point_id", "composite", "depth_cm", "moved"]
#: Point statuses whose cores are taken (fieldplan.field.mark); the others' cores are kept, not used.
_ACTIVE = ("selected", "replacement", "substitute")
#: Substitute cores are numbered S01, S02, ... after their sample id, apart from the retired ones.
_SUBSTITUTE_CORE = "-S"  # core ids carry no "/": they become file names and URLs


def _ids_text(ids) -> str:
    # Every moved point is named: the crew and the lab need to know which ones.
    return ", ".join(ids)


def _move_notes(
    point_ids: np.ndarray, shift: np.ndarray, moved_cores: np.ndarray, radius: float
) -> list[str]:
    """Block flags for points moved into the allowed area and cores moved within their disc."""
    notes = []
    far = shift > 0.005
    if far.any():
        notes.append(
            f"cores: {int(far.sum())} point(s) moved into the core area (buffer strip) with their cores, "
            f"up to {shift[far].max():.1f} m: "
            + _ids_text(f"{p} {d:.1f} m" for p, d in zip(point_ids[far], shift[far], strict=True))
        )
    if moved_cores.any():
        per_point = moved_cores.sum(axis=1)
        hit = per_point > 0
        notes.append(
            f"cores: {int(per_point.sum())} core(s) moved to the nearest allowed spot within {radius:g} m "
            "of their point: "
            + _ids_text(f"{p} ({k})" for p, k in zip(point_ids[hit], per_point[hit], strict=True))
        )
    return notes


def _cores_frame(sample, core, block, point, composite, depth, xy, moved, crs, *, prefix: str = "-"):
    table = pd.DataFrame(
        {
            "sample_id": sample,
            "core": core,
            "block": block,
            "point_id": point,
            "composite": composite,
            "depth_cm": depth,
            "moved": np.asarray(moved, dtype=np.int64),
        }
    )
    table["core_id"] = (
        table["sample_id"].astype(str) + prefix + table["core"].astype(int).astype(str).str.zfill(2)
    )
    return gpd.GeoDataFrame(
        table[_CORE_COLUMNS],
        geometry=shapely.points(np.asarray(xy[:, 0], float), np.asarray(xy[:, 1], float)),
        crs=crs,
    )


def core_status(cores: gpd.GeoDataFrame, points: pd.DataFrame) -> gpd.GeoDataFrame:
    """Give each cell core the ``status`` of its point's sample: active, spare or retired.

    Cores of a point marked inaccessible are ``retired`` (kept, never taken);
    those of an unused spare are ``spare``. Without a point ``status`` column
    (a plan nobody marked, without spares) the cores get none.
    """
    cores = cores.drop(columns=[c for c in ("status",) if c in cores.columns])
    if "status" not in points.columns or not len(cores):
        return cores
    ids = pd.Index(points["point_id"].astype(str))
    status = points["status"].fillna("selected").astype(str).to_numpy(dtype=object)
    core_point = cores["point_id"].astype(str)
    if ids.is_unique:
        # Each core's point looked up once for all cores (no per-core dictionary look-up).
        at = ids.get_indexer(core_point)
        own = pd.Series(np.where(at >= 0, status[at], ""), index=cores.index, dtype=object)
    else:
        own = core_point.map(dict(zip(ids, status, strict=True))).fillna("")
    out = np.where(
        own.isin(_ACTIVE) | (core_point == ""),
        "active",
        np.where(own == "spare", "spare", "retired"),
    )
    cores = cores.copy()
    cores.insert(len(_CORE_COLUMNS), "status", out.astype(object))
    return cores


def _soil_cores(plan, points, *, n, radius, composite, buffer_m, depth):
    """Cores layer, points (moved where their cores needed it) and per-block notes for a soil plan.

    Each block's cores are drawn from its own generator; the allowed areas, the
    discs and the layer are made once for all blocks (no geometry work per block).
    """
    xy_all = shapely.get_coordinates(points.geometry.values).copy()
    shift_all = np.zeros(len(points))
    groups = points.groupby(points["block"].astype(str), sort=False).indices
    names_all = plan.blocks["block"].astype(str).tolist()
    take = [i for i, b in enumerate(names_all) if b in groups]
    names = [names_all[i] for i in take]
    notes = {}
    if names:
        geoms = np.asarray(plan.blocks.geometry.values, dtype=object)[take]
        drawn = _draw_cores(
            plan,
            points,
            names,
            geoms,
            [groups[b] for b in names],
            xy_all,
            shift_all,
            n=n,
            radius=radius,
            composite=composite,
            buffer_m=buffer_m,
        )
        owner, number, xys, moved, block_of, notes = drawn
        cores = _cores_layer(points, owner, number, (names, block_of), composite, depth, xys, moved, plan.crs)
    else:
        cores = _cores_frame([], [], [], [], [], [], np.empty((0, 2)), [], plan.crs)
    if composite == "cell":
        points = points.copy()
        if shift_all.any():
            points[points.geometry.name] = gpd.array.from_shapely(
                shapely.points(xy_all[:, 0], xy_all[:, 1]), crs=points.crs
            )
        # Metres the point moved so its cores fit in the allowed area (0 for most).
        points["moved_m"] = np.round(shift_all, 2)
    return core_status(cores, points), points, notes


def _draw_cores(plan, points, names, geoms, idxs, xy_all, shift_all, *, n, radius, composite, buffer_m):
    """Cores of the sampled blocks ``names`` (outlines ``geoms``, point rows ``idxs``).

    Moves the cell composites' centres in ``xy_all`` and ``shift_all`` in place.
    Returns the rows of :func:`_cores_layer` (owner, core number, block index,
    positions, moved) and the per-block notes.
    """
    from fieldplan.samples.cores import disc_composites_many, usable_core_areas, zigzag_cores

    # Every block's own generator, seeded for all blocks at once (the same as stream()).
    rngs = list(streams(plan.seed, ("cores" if composite == "cell" else "zone-cores",), names))
    # Allowed areas of all sampled blocks in one pass; smaller buffers only where needed.
    areas, used, failed = usable_core_areas(geoms, _exclusion_geoms(plan), buffer_m=buffer_m)
    if failed >= 0:
        raise DesignError(
            f"block {names[failed]}: the block has no room for soil cores once exclusions are removed; "
            "check the block outline and the exclusion polygons"
        )
    block_notes = [[] for _ in names]
    for k in np.flatnonzero(used < buffer_m):
        block_notes[k].append(
            f"cores: edge buffer cut to {float(used[k]):g} m (block too small for {buffer_m:g} m)"
        )
    counts = np.array([len(i) for i in idxs], dtype=np.int64)
    if composite == "cell":
        point_ids = points["point_id"].astype(str).to_numpy()
        order = np.concatenate(idxs)
        point_block = np.repeat(np.arange(len(names), dtype=np.int64), counts)
        out = disc_composites_many(xy_all[order], point_block, areas, rngs, n=n, radius=radius)
        xy_all[order], shift_all[order] = out.centres, out.shift_m
        # Notes only for the blocks where a point or a core moved.
        busy = np.unique(point_block[(out.shift_m > 0.005) | out.moved.any(axis=1)])
        ends = np.cumsum(counts)
        for k in busy:
            part = slice(ends[k] - counts[k], ends[k])
            block_notes[k] += _move_notes(point_ids[idxs[k]], out.shift_m[part], out.moved[part], radius)
        owner = np.repeat(order, n)
        number = np.tile(np.arange(1, n + 1), len(order))
        block_of = np.repeat(point_block, n)
        xys = out.xy.reshape(-1, 2)
        moved = np.asarray(out.moved, dtype=np.int64).reshape(-1)
    else:
        # One composite per block: a traverse each (a handful of blocks per zone plan).
        xys = np.concatenate(
            [
                np.asarray(zigzag_cores(geoms[k], n=n, area=areas[k], rng=rngs[k]), dtype=float).reshape(
                    -1, 2
                )
                for k in range(len(names))
            ]
        )
        owner = np.repeat([idx[0] for idx in idxs], n)
        number = np.tile(np.arange(1, n + 1), len(names))
        block_of = np.repeat(np.arange(len(names), dtype=np.int64), n)
        moved = np.zeros(n * len(names), dtype=np.int64)
    notes = {name: these for name, these in zip(names, block_notes, strict=True) if these}
    return owner, number, xys, moved, block_of, notes


def _cores_layer(points, owner, core, blocks, composite, depth, xy, moved, crs) -> gpd.GeoDataFrame:
    """:func:`_cores_frame` for many blocks at once, its text columns built whole.

    ``owner`` is the row in ``points`` of each core's sample (its point for cell
    composites; block composites have no point); ``blocks`` the block names and
    each core's index into them.
    """
    size = owner.size
    sample = to_text(points["sample_id"].astype(str).array.take(owner))
    point = to_text(points["point_id"].astype(str).array.take(owner)) if composite == "cell" else None
    columns = {
        "core_id": join_text([sample, "-", zero_padded(core, 2)], size),
        "sample_id": sample,
        "core": np.asarray(core, dtype=np.int64),
        "block": take_text(*blocks),
        "point_id": point if point is not None else repeat_text("", size),
        "composite": repeat_text(composite, size),
        "depth_cm": repeat_text(depth, size),
        "moved": np.asarray(moved, dtype=np.int64),
    }
    return gpd.GeoDataFrame(columns, geometry=bulk_points(xy[:, 0], xy[:, 1]), crs=crs)


def field_cores(
    plan, points: gpd.GeoDataFrame
) -> tuple[gpd.GeoDataFrame | None, gpd.GeoDataFrame, list[str]]:
    """Cores for the points now to be sampled, after field changes (``fieldplan mark``).

    A within-cell substitute in use gets its own cores around it, drawn as at
    planning time (the substitute moves, like a plan point, when it lies in the
    buffer strip); cores of points marked inaccessible are kept with ``status``
    ``retired``. The result depends only on the plan and the current points, so
    restoring every point gives back the cores as planned.

    Returns
    -------
    cores : GeoDataFrame or None
        The new cores layer (None when the plan has none).
    points : GeoDataFrame
        ``points`` with moved substitutes.
    notes : dict
        Per block, a line for each substitute (or core of one) that had to move.
    """
    from fieldplan.samples.cores import disc_composites_many, usable_core_areas

    cores = plan.layers.get("cores")
    params = plan.params
    if cores is None or params.get("purpose") != "soil" or (params.get("composite") or "cell") != "cell":
        return cores, points, {}
    # Plans keep the options as given (fieldplan.spec, None for a default); older plans the
    # resolved values under *_m names. Either way, resolve them as planning did.
    soil = resolve_purpose(
        purpose="soil",
        cores=params.get("cores"),
        core_radius=params.get("core_radius_m", params.get("core_radius")),
        composite="cell",
        depth=params.get("depth_cm", params.get("depth")),
        core_buffer=params.get("core_buffer_m", params.get("core_buffer")),
    )
    base = cores[~cores["core_id"].astype(str).str.contains(_SUBSTITUTE_CORE, regex=False)]
    base = base.drop(columns=[c for c in ("status",) if c in base.columns])
    status = points["status"].astype(str) if "status" in points.columns else pd.Series("", index=points.index)
    has_cores = points["point_id"].astype(str).isin(base["point_id"].astype(str).unique())
    need = np.flatnonzero(((status == "substitute") & ~has_cores).to_numpy())
    frames: list = [base]
    notes: dict[str, list[str]] = {}
    if need.size:
        n, radius = int(soil["cores"]), float(soil["core_radius_m"])
        buffer_m, depth = float(soil["core_buffer_m"]), soil["depth_cm"]
        exclusions = _exclusion_geoms(plan)
        geoms = dict(zip(plan.blocks["block"].astype(str), plan.blocks.geometry.values, strict=True))
        points = points.copy()
        xy = shapely.get_coordinates(points.geometry.values[need]).reshape(-1, 2)
        new_xy = xy.copy()
        if "moved_m" in points.columns:
            points["moved_m"] = points["moved_m"].astype(float)
        pids = points["point_id"].astype(str).to_numpy()[need]
        blocks = points["block"].astype(str).to_numpy()[need]
        # Each block's allowed area once, blocks in the order their first substitute comes.
        names = pd.unique(blocks)
        block_areas, _, failed = usable_core_areas(
            np.array([geoms[b] for b in names], dtype=object), exclusions, buffer_m=buffer_m
        )
        if failed >= 0:
            raise DesignError(
                f"block {names[failed]}: the block has no room for soil cores once exclusions are removed; "
                "check the block outline and the exclusion polygons"
            )
        areas = block_areas[pd.Index(names).get_indexer(blocks)]
        # One stream per substitute id; all substitutes drawn in one pass, each as if alone.
        rngs = streams(plan.seed, ("substitute-cores",), list(pids))
        out = disc_composites_many(xy, np.arange(len(need)), areas, rngs, n=n, radius=radius)
        new_xy[:] = out.centres
        for j in np.flatnonzero((out.shift_m > 0.005) | out.moved.any(axis=1)):
            moved_notes = _move_notes(pids[j : j + 1], out.shift_m[j : j + 1], out.moved[j : j + 1], radius)
            notes.setdefault(blocks[j], []).extend(moved_notes)
        if "moved_m" in points.columns:
            col = points.columns.get_loc("moved_m")
            points.iloc[need, col] = [round(float(d), 2) for d in out.shift_m]
        frames.append(
            _cores_frame(
                np.repeat(points["sample_id"].to_numpy()[need], n),
                np.tile(np.arange(1, n + 1), len(need)),
                np.repeat(blocks, n),
                np.repeat(pids, n),
                "cell",
                depth,
                out.xy.reshape(-1, 2),
                out.moved.reshape(-1),
                plan.crs,
                prefix=_SUBSTITUTE_CORE,
            )
        )
        geom = np.asarray(points.geometry.values, dtype=object).copy()
        geom[need] = shapely.points(new_xy[:, 0], new_xy[:, 1])
        points[points.geometry.name] = gpd.array.from_shapely(geom, crs=points.crs)
    layer = gpd.GeoDataFrame(pd.concat(frames, ignore_index=True), geometry="geometry", crs=cores.crs)
    return core_status(layer, points), points, notes


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


def with_notes(blocks: gpd.GeoDataFrame, notes: dict[str, list[str]]) -> gpd.GeoDataFrame:
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
        # Soil cores only: other purposes never load fieldplan.samples.cores.
        from fieldplan.samples.cores import (
            DEFAULT_BUFFER_M,
            DEFAULT_CORE_RADIUS_M,
            DEFAULT_CORES,
            DEFAULT_DEPTH_CM,
        )

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
        if composite == "zone":
            composite = "block"  # its former name (zone now means a management zone); one release
        if composite not in COMPOSITES:
            raise OptionError(f"--composite must be one of {', '.join(COMPOSITES)}; got {composite!r}")
        out.update(cores=n, core_radius_m=radius, composite=composite, core_buffer_m=buffer_m)
        out["depth_cm"] = parse_depth(depth if depth is not None else "{:g}-{:g}".format(*DEFAULT_DEPTH_CM))
    else:
        out["depth_cm"] = parse_depth(depth)
    if purpose == "ripeness":
        from fieldplan.samples.profiles import load_profile  # ripeness only: TOML profiles

        out["profile"] = load_profile(crop_profile or DEFAULT_PROFILE)
    return out


def _sample_options(samples) -> dict:
    """The purpose options of a plan specification's samples section, as keywords."""
    return {
        "purpose": samples.purpose,
        "cores": samples.cores,
        "core_radius": samples.core_radius,
        "composite": samples.composite,
        "depth": samples.depth,
        "crop_profile": samples.crop_profile,
        "core_buffer": samples.core_buffer,
    }


def check_samples(samples) -> dict:
    """:func:`resolve_purpose` on a plan specification's samples section: a bad option (a
    missing crop profile, say) fails before any design work."""
    return resolve_purpose(**_sample_options(samples))


def apply_samples(plan, samples):
    """:func:`apply_purpose` with the options of a plan specification's samples section.

    Parameters
    ----------
    plan : fieldplan.plan.Plan
    samples : fieldplan.spec.SampleSpec
        ``spec.samples`` of the plan's specification.
    """
    return apply_purpose(plan, **_sample_options(samples))


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
    composite : {"cell", "block"}, optional, keyword-only
        ``cell``: one composite per plan point, cores around it. ``block``: one
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
    # Columns of one value, and the ids, built whole in pandas' text type (fieldplan.planning.text_columns).
    points["purpose"] = repeat_text(purpose, len(points))
    points["depth_cm"] = repeat_text(depth_text, len(points))
    one_per_point = not (purpose == "soil" and composite == "block")
    if not one_per_point:
        blocks = points["block"].astype(str)
        order = pd.unique(blocks)
        ids = dict(zip(order, make_sample_ids(len(order), code=code), strict=True))
        points["sample_id"] = blocks.map(ids).to_numpy()
    else:
        points["sample_id"] = to_text(sample_id_bytes(len(points), code=code))
    profile_notes: list[str] = []
    if profile is not None:
        points["per_sample"] = repeat_text(profile.units_text, len(points))
        points["instructions"], profile_notes = _profile_instructions(plan, points, profile)

    layers = dict(plan.layers)
    blocks = plan.blocks
    if purpose == "soil":
        layers["cores"], points, notes = _soil_cores(
            plan, points, n=n, radius=radius, composite=composite, buffer_m=buffer_m, depth=depth_text
        )
        blocks = with_notes(plan.blocks, notes)
    else:
        layers.pop("cores", None)
    if profile is not None and plan.params.get("design") != "clusters":
        # The clusters design skips border rows and row ends itself (its own options).
        blocks = with_notes(blocks, _edge_notes(plan, points, profile))
    meta = dict(plan.meta)
    if profile_notes:
        meta["notes"] = [*meta.get("notes", []), *profile_notes]
    if "counts" in meta:
        # One id per point, all distinct (serials), unless a block shares one composite.
        samples = len(points) if one_per_point else int(points["sample_id"].nunique())
        meta["counts"] = {**meta["counts"], "samples": samples}
        if "cores" in layers:
            meta["counts"]["cores"] = int(len(layers["cores"]))
    return replace(plan, blocks=blocks, points=points, params=params, meta=meta, layers=layers)
