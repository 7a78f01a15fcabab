"""fieldplan on GeoDataFrames: prepare blocks you already hold, sample points in their CRS.

For notebooks and scripts that have their blocks as a GeoDataFrame rather than
a file::

    import geopandas as gpd
    import fieldplan

    fields = gpd.read_file("blocks.geojson")              # any CRS, e.g. EPSG:4326
    points = fieldplan.sample_points(fields, {"design": "balanced", "per_block": 4}, seed=7)
    points.crs == fields.crs                                # True

    blocks = fieldplan.prepare_blocks(fields.to_crs(fields.estimate_utm_crs()))
    plan = fieldplan.make_plan(blocks, {"spacing": 40}, seed=7)

:func:`prepare_blocks` is strict (a metric CRS, a block column, polygons):
planning in degrees or with unnamed blocks would give a plan that looks right
and is not. :func:`sample_points` projects to the local UTM zone itself and
gives the points back in the input's CRS.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from pyproj import CRS

from fieldplan.errors import InvalidBlocksError

__all__ = ["prepare_blocks", "sample_points", "check_plannable"]

_ROLE_COLUMNS = {
    "block": "block",
    "variety": "variety",
    "row_spacing": "row_spacing_m",
    "plant_spacing": "plant_spacing_m",
    "row_bearing": "row_bearing_deg",
    "crop": "crop",
    "stratum": "stratum",
}
_LENGTHS = ("row_spacing_m", "plant_spacing_m")


class BlocksParamError(InvalidBlocksError):
    """Blocks handed to the library are not plannable; ``param`` names the argument to fix."""

    def __init__(self, param: str, message: str) -> None:
        self.param = param
        super().__init__(message)


def _metric_problem(crs: Any) -> str | None:
    """Why ``crs`` cannot measure metres (``None`` if it can)."""
    if crs is None:
        return "have no CRS; set the one the coordinates are in, e.g. gdf.set_crs('EPSG:4326')"
    crs = CRS.from_user_input(crs)
    if crs.is_geographic:
        return (
            f"are in a geographic CRS ({crs.to_string()}), in degrees; project them first, e.g. "
            "gdf.to_crs(gdf.estimate_utm_crs()), or use fieldplan.sample_points, which does so"
        )
    units = {axis.unit_name for axis in crs.axis_info}
    if not units <= {"metre", "meter"}:
        return (
            f"are in a CRS measured in {', '.join(sorted(units))} ({crs.to_string()}); "
            "plans measure metres: project them with gdf.to_crs(gdf.estimate_utm_crs())"
        )
    return None


def check_plannable(blocks: gpd.GeoDataFrame) -> None:
    """Refuse blocks :func:`fieldplan.plan.make_plan` would plan wrongly (cheap checks only).

    Raises
    ------
    InvalidBlocksError
        Not a GeoDataFrame, no metric CRS, or no ``block`` column.
    """
    if not isinstance(blocks, gpd.GeoDataFrame):
        raise BlocksParamError("blocks", f"blocks must be a GeoDataFrame, got {type(blocks).__name__}")
    problem = _metric_problem(blocks.crs)
    if problem:
        raise BlocksParamError("blocks", f"blocks {problem}")
    if "block" not in blocks.columns:
        raise BlocksParamError(
            "blocks",
            "blocks have no 'block' column; name one with fieldplan.prepare_blocks(gdf, block='FIELD') "
            f"(columns: {', '.join(map(str, _columns(blocks))) or 'none'})",
        )


def _columns(frame: pd.DataFrame) -> list:
    return [c for c in frame.columns if c != frame.geometry.name]


def prepare_blocks(
    gdf: gpd.GeoDataFrame,
    *,
    block: str = "block",
    columns: Mapping[str, str] | None = None,
    length_unit: str = "m",
    repair: bool = False,
) -> gpd.GeoDataFrame:
    """Check blocks held as a GeoDataFrame and give them the columns a plan uses.

    Parameters
    ----------
    gdf : geopandas.GeoDataFrame
        Block polygons in a projected CRS measured in metres.
    block : str
        Column holding the block ids (unique, non-empty).
    columns : mapping, optional
        Columns playing other roles, ``{ROLE: COLUMN}`` with roles ``variety,
        row_spacing, plant_spacing, row_bearing, crop, stratum`` (as ``--column``).
    length_unit : {"m", "ft", "yd", "us-ft"}
        Unit of the row and plant spacing columns; converted to metres.
    repair : bool
        Repair invalid polygons with :func:`shapely.make_valid` instead of refusing them.

    Returns
    -------
    geopandas.GeoDataFrame
        A copy with ``block, variety, row_spacing_m, plant_spacing_m,
        row_bearing_deg`` (missing attributes are empty), the other columns, and
        the geometry, in the same CRS.

    Raises
    ------
    InvalidBlocksError
        A missing or geographic CRS, a missing block column, missing or repeated
        block ids, or geometries that are not valid polygons; ``param`` names the
        argument to fix.
    """
    from fieldplan.spec import _check_value, _param_meta

    if not isinstance(gdf, gpd.GeoDataFrame):
        raise BlocksParamError("gdf", f"gdf must be a GeoDataFrame, got {type(gdf).__name__}")
    problem = _metric_problem(gdf.crs)
    if problem:
        raise BlocksParamError("gdf", f"blocks {problem}")
    roles = dict(_check_value("columns", columns or {}, _param_meta("columns")))
    unit = _check_value("length_unit", length_unit, _param_meta("length_unit"))
    unknown = [r for r in roles if r not in _ROLE_COLUMNS]
    if unknown:
        raise BlocksParamError(
            "columns", f"columns: unknown role {unknown[0]!r}; roles are {', '.join(_ROLE_COLUMNS)}"
        )
    roles.setdefault("block", block)
    present = [str(c) for c in _columns(gdf)]
    for role, source in roles.items():
        if source not in gdf.columns and not (role != "block" and source == _ROLE_COLUMNS[role]):
            param = "block" if role == "block" else "columns"
            raise BlocksParamError(
                param, f"{param}: no column {source!r} in the blocks; columns are {', '.join(present) or 'none'}"
            )
    if len(gdf) == 0:
        raise BlocksParamError("gdf", "gdf holds no blocks")

    ids = gdf[roles["block"]]
    missing = np.flatnonzero(ids.isna().to_numpy() | (ids.astype(str).str.strip() == "").to_numpy())
    if missing.size:
        raise BlocksParamError("block", f"block: row {int(missing[0])} has no block id in {roles['block']!r}")
    ids = ids.astype(str).str.strip()
    repeated = ids[ids.duplicated()]
    if len(repeated):
        raise BlocksParamError(
            "block", f"block: id {repeated.iloc[0]!r} names more than one row; give each block its own id"
        )

    geoms = np.asarray(gdf.geometry.values, dtype=object)
    kinds = shapely.get_type_id(geoms)
    bad = np.flatnonzero(~np.isin(kinds, (3, 6)))  # Polygon, MultiPolygon
    if bad.size:
        raise BlocksParamError(
            "gdf", f"block {ids.iloc[bad[0]]!r} is not a polygon ({shapely.get_type_id(geoms[bad[0]])}); keep polygons only"
        )
    invalid = np.flatnonzero(~shapely.is_valid(geoms))
    if invalid.size and not repair:
        reason = shapely.is_valid_reason(geoms[invalid[0]])
        raise BlocksParamError(
            "repair", f"block {ids.iloc[invalid[0]]!r} is not a valid polygon ({reason}); pass repair=True"
        )
    if invalid.size:
        fixed = shapely.make_valid(geoms[invalid])
        geoms = geoms.copy()
        geoms[invalid] = [_polygons(g) for g in fixed]
    if (shapely.area(geoms) <= 0).any():
        raise BlocksParamError("gdf", f"block {ids.iloc[int(np.argmin(shapely.area(geoms)))]!r} has zero area")

    factor = {"m": 1.0, "ft": 0.3048, "yd": 0.9144, "us-ft": 1200.0 / 3937.0}[unit]
    data: dict[str, Any] = {"block": ids.to_numpy(dtype=object)}
    used = {roles["block"]}
    for role, column in _ROLE_COLUMNS.items():
        if role == "block":
            continue
        source = roles.get(role, column)
        if source in gdf.columns:
            used.add(source)
            values = gdf[source]
            if column in (*_LENGTHS, "row_bearing_deg"):
                values = pd.to_numeric(values, errors="coerce").to_numpy(dtype=float)
                if column in _LENGTHS:
                    values = values * factor
            data[column] = values if not isinstance(values, pd.Series) else values.to_numpy()
        elif column in (*_LENGTHS, "row_bearing_deg"):
            data[column] = np.full(len(gdf), np.nan)
        elif column == "variety":
            data[column] = np.full(len(gdf), "", dtype=object)
    for name in _columns(gdf):
        if name not in used and name not in data:
            data[name] = gdf[name].to_numpy()
    out = gpd.GeoDataFrame(data, geometry=geoms, crs=gdf.crs)
    out.attrs.update(source=None, sha256=None, notes=[])
    return out


def _polygons(geom: shapely.Geometry) -> shapely.Geometry:
    parts = shapely.get_parts(geom)
    polys = [p for p in parts if shapely.get_type_id(p) in (3, 6)]
    return shapely.union_all(polys) if polys else shapely.Polygon()


def sample_points(
    gdf: gpd.GeoDataFrame,
    spec: Any,
    *,
    seed: int,
    exclusions: gpd.GeoDataFrame | None = None,
    block: str | None = None,
    **prepare: Any,
) -> gpd.GeoDataFrame:
    """Plan sample points over the polygons of ``gdf`` and return them in ``gdf``'s CRS.

    Parameters
    ----------
    gdf : geopandas.GeoDataFrame
        Blocks in any CRS (geographic ones are projected to the local UTM zone to
        plan, and the points brought back).
    spec : PlanSpec or dict
        What to plan (:class:`fieldplan.spec.PlanSpec` or its flat dict).
    seed : int
        Seed of every random choice.
    exclusions : geopandas.GeoDataFrame, optional
        Areas to keep free of samples, in any CRS.
    block : str, optional
        Column of block ids; default ``block`` if there is one, else the index.
    **prepare
        Further options of :func:`prepare_blocks` (``columns``, ``length_unit``, ``repair``).

    Returns
    -------
    geopandas.GeoDataFrame
        One row per point (``point_id, block, stratum, design, sample_id`` and the
        design's columns) in ``gdf``'s CRS.
    """
    from fieldplan.crs import utm_crs_for
    from fieldplan.planning.plan import make_plan

    if not isinstance(gdf, gpd.GeoDataFrame):
        raise BlocksParamError("gdf", f"gdf must be a GeoDataFrame, got {type(gdf).__name__}")
    if gdf.crs is None:
        raise BlocksParamError("gdf", "blocks " + str(_metric_problem(None)))
    frame = gdf
    if block is None and "block" not in gdf.columns:
        frame = gdf.assign(block=[str(i) for i in gdf.index])
    metric = frame
    if _metric_problem(frame.crs):
        lon_lat = frame.to_crs("EPSG:4326").total_bounds
        metric = frame.to_crs(utm_crs_for((lon_lat[0] + lon_lat[2]) / 2, (lon_lat[1] + lon_lat[3]) / 2))
    blocks = prepare_blocks(metric, block=block or "block", **prepare)
    if exclusions is not None:
        if exclusions.crs is None:
            raise BlocksParamError("exclusions", "exclusions have no CRS; set the one their coordinates are in")
        exclusions = exclusions.to_crs(blocks.crs)
    plan = make_plan(blocks, spec, seed=seed, exclusions=exclusions, command=["fieldplan.sample_points"])
    return plan.points.to_crs(gdf.crs)
