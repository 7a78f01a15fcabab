"""Stratified designs over blocks: simple random, balanced (LPM) and plant clusters.

Each stratum (by default each block; with ``strata_by`` the blocks sharing a
value of that field) is sampled as one population: the union of its blocks'
sampled areas (edge buffer and exclusions removed). Every point still carries
the block it falls in. A stratum's sample size comes from exactly one of:

* ``per_block``: that many points per block of the stratum;
* ``per_ha``: ``round(D * sampled hectares)``;
* ``n``: a total allocated over strata (:func:`fieldplan.design.allocation.allocate`)
  by area or ``size_field``, with ``sd_field`` and ``cost_field`` for Neyman and
  optimal allocation;
* ``target_units`` (clusters): ``ceil(target / units_per_cluster)`` clusters per
  stratum, the last taking the remainder.

Each stratum draws from its own generator, ``fieldplan.rng.stream(seed,
"design", stratum)``, so a stratum's points do not depend on the others or on
processing order. Allocation ties use ``stream(seed, "allocation")``.
"""

from __future__ import annotations

import string
from collections.abc import Callable
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
import shapely

from fieldplan.errors import DesignError, InputError, OptionError
from fieldplan.field.spares import SELECTED, SPARE, order_draw
from fieldplan.planning.text_columns import join_text, take_text, text_dtype, to_text
from fieldplan.rng import stream, streams

if TYPE_CHECKING:
    from fieldplan.design.clusters import RowSegments

# The allocation and plant-cluster modules are imported where used: a grid plan needs neither.

__all__ = [
    "DEFAULT_INSTRUCTIONS",
    "STRATIFIED_DESIGNS",
    "check_design_options",
    "format_instructions",
    "read_rows",
    "strata_labels",
]

DEFAULT_INSTRUCTIONS = (
    "Start at row {row}, plant {plant}; sample {units} consecutive plant(s) along the row, "
    "alternating sides of the row and rotating top, middle and bottom of the canopy"
)
_FIELDS = ("block", "row", "plant", "units", "part")
_SIZE_KEYS = ("per_block", "per_ha", "n", "target_units")


def strata_labels(blocks: pd.DataFrame, strata_by: str | None) -> np.ndarray:
    """Stratum of each block: its ``strata_by`` value, or the block id."""
    if strata_by is None:
        return blocks["block"].astype(str).to_numpy(dtype=object)
    from fieldplan.spec import SpecError

    def text(value: str) -> str:
        return value.replace("{", "{{").replace("}", "}}")

    if strata_by not in blocks.columns:
        fields = ", ".join(str(c) for c in blocks.columns if c != "geometry")
        raise SpecError(
            "strata_by",
            "{strata_by} " + text(f"{strata_by!r}: no such field in the blocks; fields are {fields}"),
        )
    values = blocks[strata_by]
    missing = np.flatnonzero(values.isna().to_numpy())
    if missing.size:
        raise SpecError(
            "strata_by",
            "{strata_by} "
            + text(f"{strata_by!r}: block {blocks['block'].iloc[missing[0]]!r} has no value; ")
            + "fill it in or choose another field",
        )
    return values.astype(str).to_numpy(dtype=object)


def read_rows(path, *, crs):
    """Read mapped row lines (GeoJSON, GeoPackage, Shapefile) into ``crs``.

    Each LineString is a row, numbered in file order within each block it
    crosses and running from its first vertex; MultiLineStrings are split into
    their parts. A file without a CRS is taken as WGS84 longitude/latitude.
    """
    from pathlib import Path

    import geopandas as gpd

    path = Path(path)
    if not path.is_file():
        raise InputError(f"{path}: rows file not found; give the path of the mapped row lines")
    try:
        frame = gpd.read_file(path)
    except Exception as err:  # noqa: BLE001 - any reader failure is an input problem
        raise InputError(f"{path}: cannot read row lines ({err}); export them as GeoJSON") from None
    if frame.crs is None:
        frame = frame.set_crs("EPSG:4326")
    # Rows walked with a GPS carry heights; the row model is on the ground plane.
    flat = shapely.force_2d(frame.geometry.values)
    frame = frame.set_geometry(gpd.GeoSeries(flat, crs=frame.crs, index=frame.index))
    frame = frame.explode(index_parts=False, ignore_index=True)
    kinds = frame.geometry.geom_type.to_numpy()
    bad = np.flatnonzero(kinds != "LineString")
    if bad.size:
        raise InputError(
            f"{path}: feature {int(bad[0]) + 1} is a {kinds[bad[0]]}, not a line; give one line per row"
        )
    if len(frame) == 0:
        raise InputError(f"{path}: holds no row lines")
    return frame.to_crs(crs)


def check_design_options(design: str, options: dict) -> dict:
    """Validate the options of a stratified design; return them with defaults filled in."""
    from fieldplan.design.allocation import ALLOCATION_METHODS

    opts = {
        "strata_by": None,
        "per_block": None,
        "per_ha": None,
        "n": None,
        "allocation": "proportional",
        "size_field": None,
        "sd_field": None,
        "cost_field": None,
        "min_per_stratum": 1,
        "target_units": None,
        "units_per_cluster": None,
        "skip_row_ends": 0,
        "skip_border_rows": 0,
        "rows": None,
        "instructions": None,
        "candidates": None,
    }
    unknown = set(options) - set(opts) - {"rows_file"}
    if unknown:
        raise OptionError(f"unknown design option(s): {', '.join(sorted(unknown))}")
    opts.update({k: v for k, v in options.items() if v is not None})
    given = [k for k in _SIZE_KEYS if opts[k] is not None]
    flag = {"per_block": "--per-block", "per_ha": "--per-ha", "n": "--n", "target_units": "--target-units"}
    if len(given) != 1:
        choices = "--per-block, --per-ha or --n" + (", --target-units" if design == "clusters" else "")
        raise OptionError(
            f"--design {design} needs exactly one sample size: {choices}"
            + (f" (got {', '.join(flag[k] for k in given)})" if given else "")
        )
    if opts["target_units"] is not None and design != "clusters":
        raise OptionError("--target-units applies to --design clusters only")
    if opts["target_units"] is not None and opts["units_per_cluster"] is None:
        raise OptionError(
            "--target-units needs --plants-per-cluster (plants in each cluster, one unit from each)"
        )
    for key in ("per_block", "n", "target_units", "units_per_cluster"):
        value = opts[key]
        if value is not None and (int(value) != value or value < 1):
            raise OptionError(f"--{key.replace('_', '-')} must be a whole number of 1 or more, got {value}")
    if opts["per_ha"] is not None and not opts["per_ha"] > 0:
        raise OptionError(f"--per-ha must be positive, got {opts['per_ha']}")
    if opts["allocation"] not in ALLOCATION_METHODS:
        raise OptionError(
            f"--allocation must be one of {', '.join(ALLOCATION_METHODS)}; got {opts['allocation']!r}"
        )
    if opts["allocation"] in ("neyman", "optimal") and opts["sd_field"] is None:
        raise OptionError(
            f"--allocation {opts['allocation']} needs --sd-field (a standard deviation per block)"
        )
    if opts["allocation"] == "optimal" and opts["cost_field"] is None:
        raise OptionError("--allocation optimal needs --cost-field (cost per sample per block)")
    if opts["n"] is None and (opts["allocation"] != "proportional" or opts["size_field"]):
        raise OptionError("--allocation and --size-field apply with --n (a total to allocate) only")
    if int(opts["min_per_stratum"]) != opts["min_per_stratum"] or opts["min_per_stratum"] < 0:
        raise OptionError(f"--min-per-stratum must be a whole number >= 0, got {opts['min_per_stratum']}")
    for key in ("skip_row_ends", "skip_border_rows"):
        if int(opts[key]) != opts[key] or opts[key] < 0:
            raise OptionError(f"--{key.replace('_', '-')} must be a whole number >= 0, got {opts[key]}")
    if design != "clusters":
        for key in ("units_per_cluster", "rows", "instructions"):
            if options.get(key) is not None:
                raise OptionError(f"--{key.replace('_', '-')} applies to --design clusters only")
        if opts["skip_row_ends"] or opts["skip_border_rows"]:
            raise OptionError("--skip-row-ends and --skip-border-rows apply to --design clusters only")
    if design == "clusters":
        format_instructions(opts["instructions"] or DEFAULT_INSTRUCTIONS, pd.DataFrame())
    return opts


def format_instructions(template: str, table: pd.DataFrame) -> np.ndarray:
    """Fill ``{block}``, ``{row}``, ``{plant}``, ``{units}``, ``{part}`` in ``template`` for each pick.

    ``{part}`` names the part of a multi-part block ("part 2 of 2 (north-east)"), '' otherwise.

    Built column by column (no loop per point).
    """
    return np.asarray(join_text(_template_parts(template, table, len(table)), len(table)), dtype=object)


def _template_parts(template: str, columns, n: int) -> list:
    """The literals and field columns of ``template``, in order, for :func:`join_text`.

    ``columns`` maps field names to columns of ``n`` rows (a frame, or a dict).
    """
    try:
        parsed = list(string.Formatter().parse(template))
    except ValueError as err:
        raise OptionError(f"--instructions: {err}; use {{row}}, {{plant}}, {{units}} or {{block}}") from None
    parts: list = []
    for literal, name, spec, conv in parsed:
        if literal:
            parts.append(literal)
        if name is None:
            continue
        if name not in _FIELDS or spec or conv:
            raise OptionError(
                f"--instructions: unknown placeholder {{{name}}}; use {{row}}, {{plant}}, {{units}}, {{part}} or {{block}}"
            )
        if n:
            column = columns[name]
            dtype = getattr(column, "dtype", None)
            if isinstance(dtype, np.dtype) and dtype.kind in "iu":
                parts.append(np.asarray(column))  # written in decimal, as str() writes it
            else:
                series = column if isinstance(column, pd.Series) else pd.Series(column, copy=False)
                parts.append(series if series.dtype == text_dtype() else series.astype(str))
    return parts


_COMPASS = ("north", "north-east", "east", "south-east", "south", "south-west", "west", "north-west")


def part_names(
    blocks: pd.DataFrame, block: np.ndarray, part: np.ndarray, *, which: np.ndarray | None = None
) -> np.ndarray:
    """Name of the part each pick lies in, e.g. "part 2 of 2 (north-east)"; '' for one-part blocks.

    Parts keep the order of the block's geometry; the compass word is the side of
    the block the part's centroid lies on, so a crew can tell the parts apart on the ground.
    ``which``, the row of each pick's block in ``blocks``, saves looking ``block`` up.
    """
    labels, index = _part_labels(blocks, block, part, which=which)
    return np.asarray(labels, dtype=object)[index]


def _part_labels(
    blocks: pd.DataFrame, block: np.ndarray, part: np.ndarray, *, which: np.ndarray | None = None
) -> tuple[list[str], np.ndarray]:
    """:func:`part_names` as the distinct names (the first is '') and the name of each pick."""
    index = np.zeros(len(block), dtype=np.int64)
    if not len(block):
        return [""], index
    geoms = blocks.geometry.values
    if which is None:
        names = blocks["block"].astype(str).to_numpy()
        which = pd.Index(names).get_indexer(np.asarray(block, dtype=str))
    count = shapely.get_num_geometries(geoms)
    part = np.asarray(part, dtype=np.int64)
    multi = (count[which] > 1) & (part > 0)
    if not multi.any():
        return [""], index
    # Distinct (block, part) pairs, ordered by block then part.
    width = int(part[multi].max()) + 1
    keys, inverse = np.unique(which[multi] * width + part[multi], return_inverse=True)
    pairs = np.column_stack([keys // width, keys % width])
    whole = shapely.centroid(geoms[pairs[:, 0]])
    piece = shapely.centroid(shapely.get_geometry(geoms[pairs[:, 0]], pairs[:, 1] - 1))
    dx = shapely.get_x(piece) - shapely.get_x(whole)
    dy = shapely.get_y(piece) - shapely.get_y(whole)
    sector = np.round(np.degrees(np.arctan2(dx, dy)) % 360.0 / 45.0).astype(int) % 8
    labels = [""] + [
        f"part {p} of {count[b]} ({_COMPASS[k]})"
        for (b, p), k in zip(pairs.tolist(), sector.tolist(), strict=True)
    ]
    index[multi] = inverse.reshape(-1) + 1
    return labels, index


def _field_per_stratum(
    blocks: pd.DataFrame, field: str, members: list[np.ndarray], weights: np.ndarray, how: str
) -> np.ndarray:
    """Per-stratum value of a numeric block field: sum or area-weighted mean."""
    if field not in blocks.columns:
        fields = ", ".join(c for c in blocks.columns if c != "geometry")
        raise OptionError(f"field {field!r} is not in the blocks; fields are {fields}")
    values = pd.to_numeric(blocks[field], errors="coerce").to_numpy(dtype=float)
    bad = np.flatnonzero(~np.isfinite(values))
    if bad.size:
        raise OptionError(
            f"field {field!r}: block {blocks['block'].iloc[bad[0]]!r} has no numeric value; fill it in"
        )
    if how == "sum":
        return np.array([values[m].sum() for m in members])
    out = []
    for m in members:
        w = weights[m]
        out.append(float(np.average(values[m], weights=w)) if w.sum() > 0 else float(values[m].mean()))
    return np.array(out)


def _numeric(blocks: pd.DataFrame, field: str) -> np.ndarray:
    """A block field as floats (NaN where missing or not a number; all NaN if absent)."""
    if field not in blocks.columns:
        return np.full(len(blocks), np.nan)
    return pd.to_numeric(blocks[field], errors="coerce").to_numpy(dtype=float)


def _add_flag(flags: list[list[str]], which: np.ndarray, text) -> None:
    """Append ``text`` (one string, or one per block of ``which``) to those blocks' flags."""
    texts = [text] * len(which) if isinstance(text, str) else list(text)
    for i, t in zip(np.asarray(which).tolist(), texts, strict=True):
        flags[i].append(t)


def _row_models(blocks: pd.DataFrame, which: np.ndarray, clips: np.ndarray, rows_frame):
    """Row segments of blocks ``which`` clipped to ``clips`` (aligned with ``which``), all at once.

    Returns the segments, each segment's block (index into ``blocks``) and its row-model group
    (block and part).
    """
    from fieldplan.design.clusters import block_row_segments, block_rows_from_lines

    geoms = np.asarray(blocks.geometry.values, dtype=object)[which]
    ps = _numeric(blocks, "plant_spacing_m")[which]
    if rows_frame is not None:
        seg, owner = block_rows_from_lines(
            np.asarray(rows_frame.geometry.values, dtype=object), geoms, plant_spacing_m=ps, clips=clips
        )
        return seg, which[owner], owner
    seg, owner = block_row_segments(
        geoms,
        row_spacing_m=_numeric(blocks, "row_spacing_m")[which],
        plant_spacing_m=ps,
        row_bearing_deg=_numeric(blocks, "row_bearing_deg")[which],
        clips=clips,
    )
    return seg, which[owner], owner * (int(seg.parts.max(initial=0)) + 1) + seg.parts


def _cluster_population(blocks, use, fallback, other, gone, opts, rows_frame, flags):
    """Row segments and eligible plants of every block, block by block in one array each.

    Blocks without a row layout, or left with no eligible plant, are flagged and left out.
    ``fallback(idx)`` gives blocks ``idx`` without the edge buffer, and ``other`` marks the
    blocks where that is another area than ``use``.

    Returns
    -------
    segments : RowSegments or None
        Segments of the modelled blocks, in block order (None if there are none).
    owner, eligible : numpy.ndarray
        Block (index into ``blocks``) and eligible plants of each segment.
    modelled : bool
        Whether any block had a row layout.
    """
    from fieldplan.design.clusters import concat_segments, eligible_plants

    n = len(blocks)
    skips = {"skip_row_ends": opts["skip_row_ends"], "skip_border_rows": opts["skip_border_rows"]}
    ps = _numeric(blocks, "plant_spacing_m")
    has_ps = np.isfinite(ps) & (ps > 0)
    # Arable fields in the same file have no rows: they are left out, with a flag.
    _add_flag(
        flags,
        np.flatnonzero(~gone & ~has_ps),
        "no plant_spacing_m: no plants to sample clusters from (block left out)",
    )
    todo = ~gone & has_ps
    if rows_frame is not None:
        lines = np.asarray(rows_frame.geometry.values, dtype=object)
        tree = shapely.STRtree(lines)
        hit = np.zeros(n, dtype=bool)
        hit[
            np.unique(tree.query(np.asarray(blocks.geometry.values, dtype=object), predicate="intersects")[0])
        ] = True
        _add_flag(flags, np.flatnonzero(todo & ~hit), "no mapped rows cross the block: no plants to sample")
        todo &= hit
    else:
        no_rs = ~np.isfinite(_numeric(blocks, "row_spacing_m"))
        no_bearing = ~np.isfinite(_numeric(blocks, "row_bearing_deg"))
        missing = np.where(
            no_rs & no_bearing,
            "row_spacing_m or row_bearing_deg",
            np.where(no_rs, "row_spacing_m", "row_bearing_deg"),
        )
        bad = np.flatnonzero(todo & (no_rs | no_bearing))
        _add_flag(
            flags,
            bad,
            [f"no {m}: no row model (block left out; or give mapped rows with --rows)" for m in missing[bad]],
        )
        todo &= ~(no_rs | no_bearing)
    which = np.flatnonzero(todo)
    if not which.size:
        return None, np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64), False
    seg, owner, group = _row_models(blocks, which, use[which], rows_frame)
    count = eligible_plants(seg, groups=group, **skips)
    total = np.bincount(owner, weights=count, minlength=n)
    # The edge buffer left a sliver with no whole plant: as the other designs do when it leaves
    # nothing, sample the block's rows without it.
    retry = np.flatnonzero(todo & (total == 0) & other)
    if retry.size:
        seg2, owner2, group2 = _row_models(blocks, retry, fallback(retry), rows_frame)
        count2 = eligible_plants(seg2, groups=group2 + int(group.max(initial=0)) + 1, **skips)
        total2 = np.bincount(owner2, weights=count2, minlength=n)
        _add_flag(
            flags,
            retry[total2[retry] > 0],
            "edge buffer leaves no whole plant: sampled the block without it",
        )
        drop = np.isin(owner, retry)
        seg = concat_segments([_take(seg, ~drop), seg2])[0]
        owner = np.concatenate([owner[~drop], owner2])
        count = np.concatenate([count[~drop], count2])
        order = np.argsort(owner, kind="stable")
        seg, owner, count = _take(seg, order), owner[order], count[order]
        total = np.bincount(owner, weights=count, minlength=n)
    # Blocks left with no eligible plant keep their segments (every one with 0 eligible): no
    # rank ever falls in them.
    _add_flag(
        flags, np.flatnonzero(todo & (total == 0)), "no eligible plants in the sampled area: not sampled"
    )
    return seg, owner, count, True


def _take(seg: RowSegments, index) -> RowSegments:
    """The segments at ``index`` (a mask or indices), keeping per-segment fields aligned."""
    from fieldplan.design.clusters import RowSegments


    def pick(a):
        return None if a is None else (a[index] if np.ndim(a) else a)

    return RowSegments(
        row=seg.row[index],
        length=seg.length[index],
        plants=seg.plants[index],
        first_plant=seg.first_plant[index],
        offset=seg.offset[index],
        plant_spacing=pick(seg.plant_spacing),
        lines=pick(seg.lines),
        ends=pick(seg.ends),
        part=pick(seg.part),
        pieces=None if seg.pieces is None else seg.pieces.take(index),
    )


def _cluster_draws(
    strata, sidx, counts, capacity, active, segments, owner, eligible, members, opts, params, flags, progress
):
    """Draw every stratum's plants (one generator call per stratum), located for all strata at once.

    Returns the columns of the picks, stratum by stratum in draw order.
    """
    from fieldplan.design.clusters import cluster_sizes, pick_plants_many

    seed = params["seed"]
    n_spares = int(params.get("spares") or 0)
    over = np.flatnonzero(counts > capacity)
    if over.size:
        h = over[0]
        raise DesignError(
            f"stratum {strata[h]!r} needs {int(counts[h])} plants but only {capacity[h]:.0f} are eligible; "
            "lower the sample size or --skip-row-ends/--skip-border-rows"
        )
    for h in np.flatnonzero((counts == 0) & active):
        _add_flag(flags, members[h], "no points allocated to this stratum")
    drawn = np.flatnonzero(counts > 0)
    n_sel = counts[drawn].astype(np.int64)
    # Spares continue the same draw (fieldplan.field.spares); they never exceed the eligible plants.
    n_all = np.minimum(n_sel + n_spares, capacity[drawn]).astype(np.int64)
    # Segments stratum by stratum (blocks in order within each); strata that draw nothing left out.
    slot = np.full(len(strata), -1, dtype=np.int64)
    slot[drawn] = np.arange(drawn.size)
    seg_slot = slot[sidx[owner]]
    order = np.flatnonzero(seg_slot >= 0)
    order = order[np.argsort(seg_slot[order], kind="stable")]
    rngs = streams(seed, ("design",), [str(strata[h]) for h in drawn.tolist()])
    if progress is not None:
        for h in drawn.tolist():
            progress(h + 1, len(strata))
    picks, which = pick_plants_many(
        segments,
        seg_slot[order],
        n_all,
        rngs,
        eligible=eligible,
        skip_row_ends=int(opts["skip_row_ends"]),
        order=order,
    )
    picked = picks.segment
    pos = np.arange(which.size) - np.repeat(np.cumsum(n_all) - n_all, n_all)
    units_per = int(opts["units_per_cluster"] or 1)
    units = np.full(which.size, units_per, dtype=np.int64)
    if opts["target_units"] is not None:
        sizes = cluster_sizes(int(opts["target_units"]), units_per)
        sel = pos < n_sel[which]
        units[sel] = sizes[np.minimum(pos[sel], sizes.size - 1)]
    # Mapped rows are numbered over the whole block, whatever its parts.
    mapped = params.get("rows_frame") is not None
    part = np.zeros(which.size, dtype=np.int64) if mapped else picks.part
    columns = {
        "_order": owner[picked],
        "x": picks.x,
        "y": picks.y,
        "row": picks.row,
        "plant": picks.plant,
        "units": units,
        "part": part,
    }
    if n_spares:
        rank = np.maximum(pos - n_sel[which] + 1, 0)
        columns["status"] = np.where(rank == 0, SELECTED, SPARE).astype(object)
        columns["spare_rank"] = rank
    return columns


def _owner_blocks(x: np.ndarray, y: np.ndarray, geoms: np.ndarray) -> np.ndarray:
    """Index into ``geoms`` of the geometry holding each point (nearest if on no one)."""
    owner = np.full(x.size, -1, dtype=np.int64)
    for j, geom in enumerate(geoms):
        if owner.min(initial=0) >= 0:
            break
        inside = shapely.contains_xy(geom, x, y) & (owner < 0)
        owner[inside] = j
    lost = np.flatnonzero(owner < 0)
    if lost.size:
        pts = shapely.points(x[lost], y[lost])
        dist = np.stack([shapely.distance(pts, g) for g in geoms], axis=1)
        owner[lost] = np.argmin(dist, axis=1)
    return owner


def _stratified(
    design: str,
    blocks,
    areas: np.ndarray,
    params: dict,
    exclusion_union,
    progress: Callable[[int, int], None] | None,
) -> tuple[pd.DataFrame, list[list[str]]]:
    opts = params["design_options"]
    seed = params["seed"]
    n_spares = int(params.get("spares") or 0)
    labels = blocks["stratum"].astype(str).to_numpy(dtype=object)
    sidx, uniques = pd.factorize(labels)  # strata in order of first appearance
    strata = list(uniques)
    by_stratum = np.argsort(sidx, kind="stable")
    members = np.split(by_stratum, np.cumsum(np.bincount(sidx, minlength=len(strata)))[:-1])
    flags: list[list[str]] = [[] for _ in range(len(blocks))]

    # The population of each stratum: its blocks' sampled areas.
    empty = shapely.is_empty(areas) | (shapely.area(areas) <= 0)
    geoms = np.asarray(blocks.geometry.values, dtype=object)

    def fallback(idx: np.ndarray) -> np.ndarray:
        # The blocks at idx without the edge buffer (exclusions still out), built only where needed.
        return geoms[idx] if exclusion_union is None else shapely.difference(geoms[idx], exclusion_union)

    use = np.array(areas, dtype=object)
    at = np.flatnonzero(empty)
    if at.size:
        use[at] = fallback(at)
    # Where the block without the buffer is another area than the one sampled (a retry can help).
    other = ~empty & np.fromiter((a is not g for a, g in zip(areas, geoms, strict=True)), bool, len(geoms))
    gone = shapely.is_empty(use) | (shapely.area(use) <= 0)
    _add_flag(
        flags, np.flatnonzero(empty & ~gone), "edge buffer leaves nothing: sampled the block without it"
    )
    _add_flag(flags, np.flatnonzero(gone), "exclusions cover the block: not sampled")
    area_ha = shapely.area(use) / 10_000.0
    stratum_ha = np.bincount(sidx, weights=area_ha, minlength=len(strata))

    # Strata with no area left (or, for clusters, no plants) take no points.
    capacity = np.where(stratum_ha > 0, np.inf, 0.0)
    modelled = False
    if design == "clusters":
        segments, seg_owner, eligible, modelled = _cluster_population(
            blocks, use, fallback, other, gone, opts, params.get("rows_frame"), flags
        )
        capacity = np.bincount(sidx[seg_owner], weights=eligible, minlength=len(strata)).astype(float)

    active = capacity > 0
    if not active.any():
        if design != "clusters":
            raise DesignError("no block has area left to sample after the edge buffer and exclusions")
        if modelled:
            raise DesignError(
                "no block has a whole eligible plant left after the exclusions and the plants and rows "
                "skipped; lower --skip-row-ends/--skip-border-rows or check the row spacings"
            )
        from fieldplan.read import row_fields_hint

        raise DesignError(
            "no block has a row layout (row_spacing_m, plant_spacing_m, row_bearing_deg) "
            "or mapped rows (--rows); clusters need plants to draw from" + row_fields_hint(blocks)
        )
    exact, counts = _sizes(design, blocks, members, stratum_ha, capacity, opts, seed, active)

    # One list of column arrays per stratum (or, for clusters, one for all strata), joined once:
    # a DataFrame per stratum costs more than the draw itself when every block is a stratum.
    parts: list[dict[str, np.ndarray]] = []
    if design == "clusters":
        parts.append(
            _cluster_draws(
                strata,
                sidx,
                counts,
                capacity,
                active,
                segments,
                seg_owner,
                eligible,
                members,
                opts,
                params,
                flags,
                progress,
            )
        )
    # Each drawing stratum's generator, seeded for all strata at once (the same as stream()).
    drawing = np.flatnonzero(counts > 0).tolist() if design != "clusters" else []
    rngs = dict(zip(drawing, streams(seed, ("design",), [str(strata[h]) for h in drawing]), strict=True))
    for h in range(len(strata)) if design != "clusters" else ():
        n_h = int(counts[h])
        if n_h == 0:
            if active[h]:
                _add_flag(flags, members[h], "no points allocated to this stratum")
            continue
        rng = rngs[h]
        m = members[h]
        n_sel = n_h
        n_h = n_h + n_spares
        m = m[~gone[m]]
        poly = shapely.union_all(use[m]) if m.size > 1 else use[m[0]]
        if design == "random":
            from fieldplan.design.random import random_points

            xy = random_points(poly, n_h, rng=rng)
        else:
            from fieldplan.design.balanced import balanced_points

            # Enough lattice points to spread n points well, few enough to stay fast.
            cand = opts["candidates"] or int(np.clip(200 * n_h, 2_000, 20_000))
            xy = balanced_points(poly, n_h, rng=rng, candidates=int(cand)).points
        x, y = xy[:, 0], xy[:, 1]
        owner = m[_owner_blocks(x, y, use[m])] if m.size > 1 else np.full(n_h, m[0])
        part = {"_order": np.asarray(owner), "x": np.asarray(x), "y": np.asarray(y)}
        if n_spares:
            use_order, status, rank = order_draw(design, np.column_stack([x, y]), n_sel, rng=rng)
            part = {key: np.asarray(value)[use_order] for key, value in part.items()}
            part["status"], part["spare_rank"] = np.asarray(status), np.asarray(rank)
        parts.append(part)
        if progress is not None:
            progress(h + 1, len(strata))
    columns = ["_order", "x", "y"] + (["row", "plant", "units", "part"] if design == "clusters" else [])
    columns += ["status", "spare_rank"] if n_spares else []
    if parts:
        joined = {key: np.concatenate([part[key] for part in parts]) for key in columns}
        order = np.argsort(joined.pop("_order"), kind="stable")
        owner_all = np.concatenate([part["_order"] for part in parts])[order]
        data = {"block": to_text(blocks["block"].astype(str).array.take(owner_all))}
        data.update({k: v[order] for k, v in joined.items()})
        if design == "clusters":
            data.update(_cluster_texts(blocks, owner_all, data, opts))
        table = pd.DataFrame(data)
    else:
        owner_all = np.zeros(0, dtype=np.int64)
        table = pd.DataFrame(columns=["block", *columns[1:]])
        table["block"] = table["block"].astype(str)
        if design == "clusters":
            for key in ("row", "plant", "units", "part"):
                table[key] = table[key].astype(np.int64)
            table["instructions"] = format_instructions(opts["instructions"] or DEFAULT_INSTRUCTIONS, table)
            table = table.drop(columns="part")
    table.attrs["strata"] = pd.DataFrame(
        {"stratum": strata, "n_target_exact": np.round(exact, 4), "n_allocated": counts.astype(int)}
    )
    return table, flags


def _cluster_texts(blocks, owner_all: np.ndarray, data: dict, opts: dict) -> dict:
    """The ``instructions`` column of the picks (and their ``part``, dropped: the text names it)."""
    n = owner_all.size
    for key in ("row", "plant", "units", "part"):
        data[key] = data[key].astype(np.int64, copy=False)
    # Multi-part blocks number rows per part: the text names the part first.
    labels, which = _part_labels(blocks, owner_all, data.pop("part"), which=owner_all)
    template = opts["instructions"] or DEFAULT_INSTRUCTIONS
    needs_part = any(name == "part" for _, name, _, _ in string.Formatter().parse(template))
    fields = {**data, "part": take_text(labels, which) if needs_part and n else None}
    parts = _template_parts(template, fields, n)
    if not opts["instructions"] and len(labels) > 1:
        prefixes = [""] + [f"In {label} (count rows from that part's own edge): " for label in labels[1:]]
        parts.insert(0, take_text(prefixes, which))
    return {"instructions": join_text(parts, n)}


def _sizes(
    design: str,
    blocks,
    members: list[np.ndarray],
    stratum_ha: np.ndarray,
    capacity: np.ndarray,
    opts: dict,
    seed: int,
    active: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Exact and whole sample sizes per stratum; inactive strata (no plants) get none."""
    exact, counts = _active_sizes(
        design,
        blocks,
        [m for m, a in zip(members, active, strict=True) if a],
        stratum_ha[active],
        capacity[active],
        opts,
        seed,
    )
    all_exact = np.zeros(len(members))
    all_counts = np.zeros(len(members), dtype=np.int64)
    all_exact[active] = exact
    all_counts[active] = counts
    return all_exact, all_counts


def _active_sizes(
    design: str,
    blocks,
    members: list[np.ndarray],
    stratum_ha: np.ndarray,
    capacity: np.ndarray,
    opts: dict,
    seed: int,
) -> tuple[np.ndarray, np.ndarray]:
    low = int(opts["min_per_stratum"])
    if opts["per_block"] is not None:
        exact = np.array([float(opts["per_block"]) * m.size for m in members])
        return exact, exact.astype(np.int64)
    if opts["per_ha"] is not None:
        exact = float(opts["per_ha"]) * stratum_ha
        return exact, np.maximum(np.floor(exact + 0.5), low).astype(np.int64)
    if opts["target_units"] is not None:
        per = float(opts["target_units"]) / float(opts["units_per_cluster"])
        exact = np.full(len(members), per)
        return exact, np.ceil(exact - 1e-9).astype(np.int64)
    weights = np.asarray(shapely.area(blocks.geometry.values), dtype=float)
    sizes = (
        _field_per_stratum(blocks, opts["size_field"], members, weights, "sum")
        if opts["size_field"]
        else stratum_ha
    )
    sds = _field_per_stratum(blocks, opts["sd_field"], members, weights, "mean") if opts["sd_field"] else None
    costs = (
        _field_per_stratum(blocks, opts["cost_field"], members, weights, "mean")
        if opts["cost_field"]
        else None
    )
    from fieldplan.design.allocation import allocate

    result = allocate(
        int(opts["n"]),
        sizes=sizes,
        sds=sds,
        costs=costs,
        method=opts["allocation"],
        min_per_stratum=low,
        max_per_stratum=capacity if design == "clusters" else None,
        rng=stream(seed, "allocation"),
    )
    return result.exact, result.n


def _random(blocks, areas, params, exclusion_union, progress):
    return _stratified("random", blocks, areas, params, exclusion_union, progress)


def _balanced(blocks, areas, params, exclusion_union, progress):
    return _stratified("balanced", blocks, areas, params, exclusion_union, progress)


def _clusters(blocks, areas, params, exclusion_union, progress):
    from fieldplan.read import check_row_attributes

    # Blocks without rows are left out with a flag; a row model given but implausible is an error.
    check_row_attributes(blocks, needed=True, allow_missing=True, fields=("row_spacing_m", "plant_spacing_m"))
    return _stratified("clusters", blocks, areas, params, exclusion_union, progress)


STRATIFIED_DESIGNS: dict[str, Callable] = {"random": _random, "balanced": _balanced, "clusters": _clusters}
