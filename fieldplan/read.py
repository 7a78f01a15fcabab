"""Read block boundaries (and exclusion areas) into a validated GeoDataFrame in metres.

Accepted: GeoJSON, GeoPackage (``layer``), Shapefile, and a Shapefile inside a
``.zip``. Every problem is reported as one :class:`~fieldplan.errors.InputError`
naming the file, the feature and the fix.
"""

from __future__ import annotations

import hashlib
import json
import warnings
import zipfile
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from pyproj import CRS

from fieldplan.crs import WGS84, utm_crs_for
from fieldplan.errors import InputError, InvalidBlocksError

__all__ = [
    "ID_CANDIDATES",
    "ROW_FIELDS",
    "read_blocks",
    "read_exclusions",
    "file_sha256",
    "read_frame",
]

ID_CANDIDATES = ("block", "block_id", "id", "name")
ROW_FIELDS = ("row_spacing_m", "plant_spacing_m", "row_bearing_deg")
_POLYGONAL = {"Polygon", "MultiPolygon"}
_SUFFIXES = {".geojson", ".json", ".gpkg", ".shp", ".zip"}
# A feature this far from the others is more likely a digitising slip than a real block.
_FAR_KM = 1000.0


def file_sha256(path: Path) -> str:
    """SHA-256 of an input file; for a Shapefile, of its .shp, .shx, .dbf and .prj together."""
    path = Path(path)
    digest = hashlib.sha256()
    parts = [path]
    if path.suffix.lower() == ".shp":
        parts = [path.with_suffix(s) for s in (".shp", ".shx", ".dbf", ".prj")]
    for part in parts:
        if part.exists():
            digest.update(part.read_bytes())
    return digest.hexdigest()


def _check_file(path: Path) -> None:
    if not path.exists():
        raise InputError(f"{path}: file not found; check the path")
    if path.is_dir():
        raise InputError(f"{path}: is a folder; give the boundary file inside it")
    if path.stat().st_size == 0:
        raise InputError(f"{path}: file is empty; export the block boundaries again")
    suffix = path.suffix.lower()
    if suffix not in _SUFFIXES:
        raise InputError(
            f"{path}: unsupported file type '{suffix}'; use GeoJSON (.geojson), "
            "GeoPackage (.gpkg), Shapefile (.shp) or a zipped Shapefile (.zip)"
        )
    if suffix in (".geojson", ".json"):
        text = path.read_bytes().decode("utf-8", errors="replace")
        try:
            data = json.loads(text)
        except json.JSONDecodeError as err:
            raise InputError(
                f"{path}: GeoJSON syntax error at line {err.lineno}, column {err.colno} "
                f"({err.msg}); fix the file or export it again"
            ) from None
        if not isinstance(data, dict) or data.get("type") not in (
            "FeatureCollection",
            "Feature",
            "Polygon",
            "MultiPolygon",
            "GeometryCollection",
        ):
            raise InputError(
                f"{path}: not a GeoJSON FeatureCollection of block polygons; export the blocks as GeoJSON"
            )
    if suffix == ".zip":
        try:
            with zipfile.ZipFile(path) as archive:
                names = archive.namelist()
        except zipfile.BadZipFile:
            raise InputError(f"{path}: not a readable zip archive; zip the Shapefile again") from None
        if not any(n.lower().endswith(".shp") for n in names):
            raise InputError(f"{path}: the zip holds no .shp file; zip the Shapefile's files together")


def read_frame(path: Path, *, layer: str | None = None) -> gpd.GeoDataFrame:
    """Read any supported vector file into a GeoDataFrame, turning library errors into InputError."""
    path = Path(path)
    _check_file(path)
    if path.suffix.lower() == ".gpkg" and layer is None:
        import pyogrio

        layers = [row[0] for row in pyogrio.list_layers(path)]
        if len(layers) > 1 and "blocks" not in layers:
            raise InputError(
                f"{path}: GeoPackage has several layers ({', '.join(layers)}); choose one with --layer"
            )
        if "blocks" in layers:
            layer = "blocks"
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            frame = gpd.read_file(path, layer=layer, engine="pyogrio")
    except Exception as err:  # pyogrio raises several unrelated types
        first = str(err).strip().splitlines()[0] if str(err).strip() else type(err).__name__
        raise InputError(f"{path}: cannot read as a spatial file ({first}); check the format") from None
    if not isinstance(frame, gpd.GeoDataFrame) or "geometry" not in frame:
        raise InputError(f"{path}: holds no geometries; export the block boundaries as polygons")
    return frame


def _feature_label(frame: pd.DataFrame, index: int, id_field: str | None) -> str:
    if id_field is not None and id_field in frame.columns:
        return f"feature {index + 1} ({id_field}={frame[id_field].iloc[index]!r})"
    return f"feature {index + 1}"


def _pick_id_field(frame: gpd.GeoDataFrame, path: Path, id_field: str | None) -> str:
    columns = [c for c in frame.columns if c != "geometry"]
    if id_field is not None:
        if id_field not in columns:
            raise InvalidBlocksError(
                f"{path}: no field '{id_field}' for block ids; fields are: {', '.join(columns) or 'none'}"
            )
        return id_field
    lower = {c.lower(): c for c in columns}
    for candidate in ID_CANDIDATES:
        if candidate in lower:
            return lower[candidate]
    raise InvalidBlocksError(
        f"{path}: no block id field (looked for {', '.join(ID_CANDIDATES)}); "
        f"name one with --id-field (fields are: {', '.join(columns) or 'none'})"
    )


def _resolve_crs(frame: gpd.GeoDataFrame, path: Path, id_field: str) -> tuple[gpd.GeoDataFrame, list[str]]:
    notes: list[str] = []
    minx, miny, maxx, maxy = frame.total_bounds
    if frame.crs is None:
        if -180 <= minx <= maxx <= 180 and -90 <= miny <= maxy <= 90:
            notes.append(f"{path}: no CRS given; coordinates fit longitude/latitude, so WGS84 is assumed")
            frame = frame.set_crs(WGS84)
        elif -180 <= miny <= maxy <= 180 and -90 <= minx <= maxx <= 90:
            raise InvalidBlocksError(
                f"{path}: no CRS and coordinates look like latitude/longitude in swapped order; "
                "store longitude first (x) and latitude second (y)"
            )
        else:
            raise InvalidBlocksError(
                f"{path}: no CRS and coordinates are not longitude/latitude (bounds {minx:.0f}, {miny:.0f}, "
                f"{maxx:.0f}, {maxy:.0f}); add a .prj or save the file with its CRS"
            )
    crs = CRS.from_user_input(frame.crs)
    if crs.is_geographic:
        lon = shapely.get_coordinates(frame.geometry.values)
        bad = (np.abs(lon[:, 1]) > 90) | (np.abs(lon[:, 0]) > 180)
        if (np.abs(lon) > 360).any():
            x, y = lon[np.argmax(np.abs(lon).max(axis=1))]
            raise InvalidBlocksError(
                f"{path}: coordinates such as ({x:.0f}, {y:.0f}) are not longitude/latitude, but the file "
                "says (or, as GeoJSON, implies) WGS84; reproject it to WGS84 or save it with its real CRS"
            )
        if bad.any():
            raise InvalidBlocksError(
                f"{path}: latitude outside ±90 degrees; longitude and latitude are probably swapped: "
                "store longitude first (x) and latitude second (y)"
            )
        frame = frame.to_crs(WGS84) if not crs.equals(WGS84) else frame
    return frame, notes


def _check_far_features(frame_wgs: gpd.GeoDataFrame, path: Path, id_field: str) -> None:
    if len(frame_wgs) < 3:
        return
    centres = shapely.get_coordinates(shapely.centroid(frame_wgs.geometry.values))
    lon0, lat0 = np.median(centres, axis=0)
    from pyproj import Geod

    geod = Geod(ellps="WGS84")
    _, _, dist = geod.inv(
        np.full(len(centres), lon0), np.full(len(centres), lat0), centres[:, 0], centres[:, 1]
    )
    far = np.flatnonzero(dist / 1000.0 > _FAR_KM)
    for i in far:
        lon, lat = centres[i]
        _, _, swapped = geod.inv(lon0, lat0, lat, lon) if abs(lon) <= 90 else (0, 0, np.inf)
        hint = (
            "its longitude and latitude look swapped"
            if swapped / 1000.0 < _FAR_KM
            else "check its coordinates"
        )
        raise InvalidBlocksError(
            f"{path}: {_feature_label(frame_wgs, int(i), id_field)} lies {dist[i] / 1000:.0f} km from the "
            f"other blocks; {hint}"
        )


def _check_geometries(
    frame: gpd.GeoDataFrame, path: Path, id_field: str, repair: bool
) -> tuple[gpd.GeoDataFrame, list[str]]:
    notes: list[str] = []
    geoms = frame.geometry.values
    missing = np.flatnonzero(shapely.is_missing(geoms) | shapely.is_empty(geoms))
    if len(missing) == len(frame):
        raise InvalidBlocksError(f"{path}: every geometry is empty; export the block boundaries again")
    if len(missing):
        raise InvalidBlocksError(
            f"{path}: {_feature_label(frame, int(missing[0]), id_field)} has an empty geometry; "
            "delete it or redraw the block"
        )
    kinds = frame.geometry.geom_type
    if not kinds.isin(list(_POLYGONAL)).any():
        found = ", ".join(sorted(set(kinds)))
        raise InvalidBlocksError(
            f"{path}: no polygons (found {found}); blocks must be drawn as polygons, not points or lines"
        )
    not_poly = np.flatnonzero(~kinds.isin(list(_POLYGONAL)).to_numpy())
    if len(not_poly):
        i = int(not_poly[0])
        raise InvalidBlocksError(
            f"{path}: {_feature_label(frame, i, id_field)} is a {kinds.iloc[i]}, not a polygon; "
            "redraw it as a polygon or remove it"
        )
    invalid = np.flatnonzero(~shapely.is_valid(geoms))
    if len(invalid):
        if not repair:
            i = int(invalid[0])
            reason = shapely.is_valid_reason(geoms[i])
            raise InvalidBlocksError(
                f"{path}: {_feature_label(frame, i, id_field)} is not a valid polygon ({reason}); "
                "fix the outline or pass --repair to repair it with shapely.make_valid"
            )
        fixed = shapely.make_valid(geoms[invalid])
        # make_valid can return collections with stray lines; only the polygonal part is a block.
        fixed = np.array([_polygonal_part(g) for g in fixed], dtype=object)
        for i, new in zip(invalid, fixed, strict=True):
            notes.append(
                f"{path}: repaired {_feature_label(frame, int(i), id_field)} "
                f"(area {shapely.area(geoms[i]):.6g} -> {shapely.area(new):.6g} in file units)"
            )
        geoms = geoms.copy()
        geoms[invalid] = fixed
        frame = frame.set_geometry(gpd.GeoSeries(geoms, crs=frame.crs, index=frame.index))
    return frame, notes


def _polygonal_part(geom):
    if geom.geom_type in _POLYGONAL:
        return geom
    parts = [g for g in shapely.get_parts(geom) if g.geom_type in _POLYGONAL]
    if not parts:
        return shapely.Polygon()
    return shapely.union_all(parts)


def _check_ids(frame: gpd.GeoDataFrame, path: Path, id_field: str) -> pd.Series:
    raw = frame[id_field]
    ids = raw.map(lambda v: "" if v is None or (isinstance(v, float) and np.isnan(v)) else str(v).strip())
    # Integer-valued floats (common from spreadsheets) read better without ".0".
    ids = ids.map(lambda s: s[:-2] if s.endswith(".0") and s[:-2].isdigit() else s)
    blank = np.flatnonzero((ids == "").to_numpy())
    if len(blank):
        raise InvalidBlocksError(
            f"{path}: feature {blank[0] + 1} has a blank block id in '{id_field}'; give every block an id"
        )
    dup = ids[ids.duplicated(keep=False)]
    if len(dup):
        first = dup.iloc[0]
        rows = [str(i + 1) for i in np.flatnonzero((ids == first).to_numpy())]
        raise InvalidBlocksError(
            f"{path}: block id {first!r} is used by features {', '.join(rows)}; block ids must be unique "
            "(merge the parts into one multipolygon or rename them)"
        )
    return ids


def _find_column(frame: pd.DataFrame, name: str) -> str | None:
    lower = {c.lower(): c for c in frame.columns}
    if name in lower:
        return lower[name]
    # Shapefile field names are cut to 10 characters (dBASE limit).
    return lower.get(name[:10])


def _numeric_column(frame: gpd.GeoDataFrame, name: str, path: Path, id_field: str) -> np.ndarray:
    column = _find_column(frame, name)
    if column is None:
        return np.full(len(frame), np.nan)
    lower = {name: column}
    values = pd.to_numeric(frame[lower[name]], errors="coerce").to_numpy(dtype=float)
    raw = frame[lower[name]]
    bad = np.flatnonzero(
        np.isnan(values) & raw.notna().to_numpy() & (raw.astype(str).str.strip() != "").to_numpy()
    )
    if len(bad):
        i = int(bad[0])
        raise InvalidBlocksError(
            f"{path}: {_feature_label(frame, i, id_field)} has {name}={raw.iloc[i]!r}, not a number; "
            "fix the value or leave it empty"
        )
    return values


def read_blocks(
    path: str | Path,
    *,
    layer: str | None = None,
    id_field: str | None = None,
    repair: bool = False,
    crs: CRS | None = None,
) -> gpd.GeoDataFrame:
    """Read block boundaries into a GeoDataFrame in a local metric CRS.

    Parameters
    ----------
    path : str or Path
        GeoJSON, GeoPackage, Shapefile or zipped Shapefile.
    layer : str, optional
        GeoPackage layer; needed when the file holds several and none is ``blocks``.
    id_field : str, optional
        Field holding block ids; default: the first of ``block, block_id, id, name``.
    repair : bool
        Repair invalid polygons with :func:`shapely.make_valid` instead of stopping.
    crs : pyproj.CRS, optional
        Metric CRS to use; default: the UTM zone of the blocks' centre.

    Returns
    -------
    geopandas.GeoDataFrame
        Columns ``block, variety, row_spacing_m, plant_spacing_m, row_bearing_deg, geometry``
        plus the file's other attributes; ``attrs`` holds ``source``, ``sha256``, ``notes``
        (warnings for the user) and ``id_field``.
    """
    path = Path(path)
    frame = read_frame(path, layer=layer)
    if len(frame) == 0:
        raise InvalidBlocksError(f"{path}: holds no features; export the block boundaries again")
    id_name = _pick_id_field(frame, path, id_field)
    frame, notes = _check_geometries(frame, path, id_name, repair)
    frame, crs_notes = _resolve_crs(frame, path, id_name)
    notes.extend(crs_notes)
    ids = _check_ids(frame, path, id_name)

    wgs = frame if CRS.from_user_input(frame.crs).is_geographic else frame.to_crs(WGS84)
    _check_far_features(wgs, path, id_name)
    if crs is None:
        minx, miny, maxx, maxy = wgs.total_bounds
        crs = utm_crs_for((minx + maxx) / 2.0, (miny + maxy) / 2.0)
    local = frame.to_crs(crs)

    area = shapely.area(local.geometry.values)
    tiny = np.flatnonzero(area <= 1e-6)
    if len(tiny):
        raise InvalidBlocksError(
            f"{path}: {_feature_label(frame, int(tiny[0]), id_name)} has zero area; redraw it or remove it"
        )

    out = gpd.GeoDataFrame(
        {
            "block": ids.to_numpy(dtype=object),
            "variety": _text_column(frame, "variety"),
            "row_spacing_m": _numeric_column(frame, "row_spacing_m", path, id_name),
            "plant_spacing_m": _numeric_column(frame, "plant_spacing_m", path, id_name),
            "row_bearing_deg": _numeric_column(frame, "row_bearing_deg", path, id_name),
        },
        geometry=local.geometry.values,
        crs=crs,
    )
    used = {id_name} | {_find_column(frame, c) for c in out.columns}
    for column in frame.columns:
        if column != "geometry" and column not in used and column.lower() not in set(out.columns):
            out[column] = frame[column].to_numpy()
    out = out.sort_values("block", kind="stable").reset_index(drop=True)
    out.attrs.update(source=str(path), sha256=file_sha256(path), notes=notes, id_field=id_name)
    return out


def _text_column(frame: gpd.GeoDataFrame, name: str) -> np.ndarray:
    column = _find_column(frame, name)
    if column is None:
        return np.full(len(frame), None, dtype=object)
    values = frame[column]
    return np.array(
        [None if v is None or (isinstance(v, float) and np.isnan(v)) else str(v) for v in values],
        dtype=object,
    )


def read_exclusions(path: str | Path, *, crs: CRS, layer: str | None = None) -> gpd.GeoDataFrame:
    """Read polygons to keep samples out of (wet spots, buildings, tracks) into ``crs``.

    Lines and points are refused: a track or a well has a width only the user knows,
    so they are asked to buffer it into a polygon.
    """
    path = Path(path)
    frame = read_frame(path, layer=layer)
    if len(frame) == 0:
        return gpd.GeoDataFrame({"name": []}, geometry=[], crs=crs)
    geoms = frame.geometry.values
    kinds = frame.geometry.geom_type
    bad = np.flatnonzero(~kinds.isin(list(_POLYGONAL)).to_numpy() | shapely.is_empty(geoms))
    if len(bad):
        i = int(bad[0])
        raise InputError(
            f"{path}: exclusion feature {i + 1} is a {kinds.iloc[i]}, not a polygon; "
            "buffer tracks and points into polygons of the width to avoid"
        )
    if frame.crs is None:
        minx, miny, maxx, maxy = frame.total_bounds
        if not (-180 <= minx <= maxx <= 180 and -90 <= miny <= maxy <= 90):
            raise InputError(
                f"{path}: no CRS and coordinates are not longitude/latitude; save it with its CRS"
            )
        frame = frame.set_crs(WGS84)
    geoms = shapely.make_valid(frame.geometry.values)
    geoms = np.array([_polygonal_part(g) for g in geoms], dtype=object)
    lower = {c.lower(): c for c in frame.columns}
    names = (
        frame[lower["name"]].astype(str).to_numpy()
        if "name" in lower
        else np.array([f"exclusion {i + 1}" for i in range(len(frame))], dtype=object)
    )
    out = gpd.GeoDataFrame(
        {"name": names}, geometry=gpd.GeoSeries(geoms, crs=frame.crs).to_crs(crs).values, crs=crs
    )
    return out
