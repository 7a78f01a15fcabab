"""Read block boundaries (and exclusion areas) into a validated GeoDataFrame in metres.

Accepted: GeoJSON, GeoPackage (``layer``), Shapefile, a Shapefile inside a
``.zip``, and KML/KMZ (placemark name -> block id). Every problem is reported as
one :class:`~fieldplan.errors.InputError` naming the file, the feature and the fix.

Real exports name their fields their own way (``RowSpacing``, ``BLOCK_NAME``) and
often give spacings in feet: ``columns`` maps a role to the file's field and
``length_unit`` says the spacings' unit. Z coordinates are dropped (with one
note), non-polygon features (a gate pin, a track) are skipped (with one note),
and a field whose name the plan uses itself (``area_ha``, ``AREA_HA``, ``flags``)
is kept under a ``src_`` name so the outputs never hold two columns of one name.
"""

from __future__ import annotations

import difflib
import gc
import hashlib
import importlib.util
import json
import re
import warnings
import zipfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from pyproj import CRS

from fieldplan.crs import WGS84, check_lonlat_range, local_crs_for, unwrap_longitudes
from fieldplan.errors import InputError, InvalidBlocksError, OptionError
from fieldplan.limits import (
    DEFAULT_MAX_BLOCKS,
    check_block_count,
    check_json_nul,
    clean_names,
    feature_count,
    load_json,
)
from fieldplan.overlaps import resolve_overlaps
from fieldplan.words import plural

__all__ = [
    "ID_CANDIDATES",
    "ROW_FIELDS",
    "read_blocks",
    "read_exclusions",
    "select_blocks",
    "file_sha256",
    "read_frame",
    "check_row_attributes",
    "ROW_LIMITS",
    "COLUMN_ROLES",
    "LENGTH_UNITS",
    "PLAN_COLUMNS",
    "check_columns",
    "check_length_unit",
    "check_spacing_profiles",
    "row_fields_hint",
]

ID_CANDIDATES = ("block", "block_id", "block_name", "id", "name")
ROW_FIELDS = ("row_spacing_m", "plant_spacing_m", "row_bearing_deg")
_POLYGONAL = {"Polygon", "MultiPolygon"}
_SUFFIXES = {".geojson", ".json", ".gpkg", ".shp", ".zip", ".kml", ".kmz"}
# Roles a file's field can play (``--column ROLE=SOURCE``) and the column each one becomes.
COLUMN_ROLES: dict[str, str] = {
    "block": "block",
    "variety": "variety",
    "row_spacing": "row_spacing_m",
    "plant_spacing": "plant_spacing_m",
    "row_bearing": "row_bearing_deg",
    "crop": "crop",
    "stratum": "stratum",
}
# Metres per unit of the spacing attributes: exact by definition (international yard and
# pound agreement, 1959: 1 ft = 0.3048 m, 1 yd = 0.9144 m; US survey foot = 1200/3937 m).
LENGTH_UNITS: dict[str, float] = {"m": 1.0, "ft": 0.3048, "yd": 0.9144, "us-ft": 1200.0 / 3937.0}
# Columns the plan writes on its blocks layer (and GeoPackage's own "fid"). A file's field
# with one of these names, in any case, would collide with them: GeoPackage column names
# are case-insensitive, so AREA_HA and area_ha cannot both be written.
PLAN_COLUMNS = (
    "fid",
    "geometry",
    "block",
    "stratum",
    "variety",
    "crop",
    "row_spacing_m",
    "plant_spacing_m",
    "row_bearing_deg",
    "area_ha",
    "sampled_area_ha",
    "n_points",
    "n_spares",
    "n_target_exact",
    "n_allocated",
    "flags",
)
RENAME_PREFIX = "src_"
# A feature this far from the others is more likely a digitising slip than a real block.
_FAR_KM = 1000.0
_MAX_COORD = 1e8
# Plausible row-model values in metres: vineyards, orchards and row crops, common practice, no source.
# Bearings may be given as -180..180 or 0..360; anything beyond one turn is a typing slip.
ROW_LIMITS: dict[str, tuple[float, float]] = {
    "row_spacing_m": (0.5, 12.0),
    "plant_spacing_m": (0.2, 15.0),
    "row_bearing_deg": (-360.0, 360.0),
}
# Leading bytes of files that users rename by mistake (file-format magic numbers).
_MAGIC = {
    b"\x89PNG": "a PNG image",
    b"\xff\xd8\xff": "a JPEG image",
    b"GIF8": "a GIF image",
    b"%PDF": "a PDF document",
    b"PK\x03\x04": "a zip archive (use the .zip extension)",
    b"SQLite format 3": "an SQLite/GeoPackage file (use the .gpkg extension)",
    b"\xd0\xcf\x11\xe0": "an old Microsoft Office file",
}


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
            "GeoPackage (.gpkg), Shapefile (.shp), a zipped Shapefile (.zip) or KML (.kml, .kmz)"
        )
    if suffix in (".geojson", ".json"):
        with path.open("rb") as handle:
            _sniff_geojson(path, handle.read(4096))
    if suffix == ".shp":
        for part in (".shx", ".dbf"):
            if not (path.with_suffix(part).exists() or path.with_suffix(part.upper()).exists()):
                raise InputError(
                    f"{path}: its {path.with_suffix(part).name} is missing; a Shapefile is several files "
                    "(.shp, .shx, .dbf, .prj): copy them all, or send them zipped together"
                )
    if suffix == ".zip":
        try:
            with zipfile.ZipFile(path) as archive:
                names = archive.namelist()
        except zipfile.BadZipFile:
            raise InputError(f"{path}: not a readable zip archive; zip the Shapefile again") from None
        shps = sorted(n for n in names if n.lower().endswith(".shp") and not n.startswith("__MACOSX"))
        if not shps:
            raise InputError(f"{path}: the zip holds no .shp file; zip the Shapefile's files together")
        if len(shps) > 1:
            raise InputError(
                f"{path}: the zip holds {len(shps)} Shapefiles ({', '.join(shps[:4])}); "
                "zip the block boundaries alone"
            )


def _check_geojson_text(path: Path) -> None:
    """Parse GeoJSON text to name a syntax error's line and column, or a non-GeoJSON type.

    Only called when the fast reader failed or found no polygons: parsing every
    coordinate in Python costs as much as reading the file.
    """
    text = path.read_bytes().decode("utf-8-sig", errors="replace")
    try:
        data = load_json(text, path)  # nesting too deep for Python is a one-line error too
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


def _sniff_geojson(path: Path, raw: bytes) -> None:
    """Name the real content of a file that is not JSON text, instead of a bare syntax error."""
    for magic, kind in _MAGIC.items():
        if raw.startswith(magic):
            raise InputError(
                f"{path}: not GeoJSON, the file is {kind}; export the block boundaries as GeoJSON"
            )
    head = raw[:4096]
    if b"\x00" in head:
        raise InputError(f"{path}: not GeoJSON, the file is binary; export the block boundaries as GeoJSON")
    text = head.decode("utf-8-sig", errors="replace").lstrip()
    if not text or text[0] in "{[":
        return
    first = text.splitlines()[0]
    if first.count(",") >= 1 or "\t" in first or first.count(";") >= 1:
        raise InputError(
            f"{path}: not GeoJSON, line 1 looks like a table (CSV): {first[:40]!r}; "
            "export the block boundaries from your GIS as GeoJSON"
        )


_HAS_ARROW = importlib.util.find_spec("pyarrow") is not None


def read_frame(
    path: Path, *, layer: str | None = None, max_features: int | None = DEFAULT_MAX_BLOCKS
) -> gpd.GeoDataFrame:
    """Read any supported vector file into a GeoDataFrame, turning library errors into InputError.

    Z (and M) coordinates are dropped: every distance and area fieldplan uses is on
    the ground plane, and the writers draw 2D shapes. ``attrs["notes"]`` says so once.
    """
    path = Path(path)
    _check_file(path)
    suffix = path.suffix.lower()
    notes: list[str] = []
    if suffix in (".kml", ".kmz"):
        from fieldplan.read_kml import read_kml

        frame, notes = read_kml(path)
        check_block_count(path, len(frame), max_blocks=max_features)
        return _drop_z(frame, path, notes)
    geojson = suffix in (".geojson", ".json")
    if suffix == ".gpkg":
        layer = _gpkg_layer(path, layer)
    if geojson:
        raw = path.read_bytes()
        # Every feature object names its type "Feature", so counting that word bounds the
        # features from above in a millisecond; GDAL's own count parses the whole file.
        count = raw.count(b'"Feature"')
        if max_features is not None and count > max_features:
            count = feature_count(path, layer)
        check_block_count(path, count, max_blocks=max_features)
        check_json_nul(path, raw)  # the reader would cut a text value at a NUL without a word
        # A layer asked for by name is GDAL's to find (or to refuse, naming the file's layer).
        plain = layer is None and len(raw) <= _PLAIN_GEOJSON_BYTES
        frame = _read_plain_geojson(raw) if plain else None
        if frame is not None:
            return _drop_z(frame, path, notes)
    else:
        # Counted from the layer's header or index, before a single feature is read.
        check_block_count(path, feature_count(path, layer), max_blocks=max_features)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            # Arrow transfer is about a quarter faster than feature by feature.
            frame = gpd.read_file(path, layer=layer, engine="pyogrio", use_arrow=_HAS_ARROW)
    except Exception as err:  # pyogrio raises several unrelated types
        if geojson:
            _check_geojson_text(path)
        first = str(err).strip().splitlines()[0] if str(err).strip() else type(err).__name__
        if "closed linestring" in first:
            raise InputError(
                f"{path}: a polygon ring is not closed or has fewer than 4 points (its last point must "
                "repeat the first); fix the outline or export the file again"
            ) from None
        raise InputError(f"{path}: cannot read as a spatial file ({first}); check the format") from None
    if geojson and (
        not isinstance(frame, gpd.GeoDataFrame)
        or "geometry" not in frame
        or not frame.geometry.geom_type.isin(list(_POLYGONAL)).any()
    ):
        _check_geojson_text(path)
    if not isinstance(frame, gpd.GeoDataFrame) or "geometry" not in frame:
        raise InputError(f"{path}: holds no geometries; export the block boundaries as polygons")
    return _drop_z(frame, path, notes)


# A GeoJSON file up to this size, of polygons with plain attributes, is read without GDAL:
# Python's json and shapely's array constructors read it in about half the time GDAL takes to
# load and read it (1,000 blocks, 2.7 MB: 0.05 s against 0.1 s). Past this size the parsed
# text would cost more memory than it is worth.
_PLAIN_GEOJSON_BYTES = 8_000_000
# Text GDAL's GeoJSON reader would take for a date, time or date-time field (not plain text).
_DATE_LIKE = re.compile(r"^\s*(\d{4}[-/]\d{1,2}[-/]\d{1,2}|\d{1,2}:\d{2})")
_INT32 = (-(2**31), 2**31 - 1)
# The crs member GDAL, QGIS and geopandas write for longitude/latitude (read as EPSG:4326).
_CRS84 = {"type": "name", "properties": {"name": "urn:ogc:def:crs:OGC:1.3:CRS84"}}


class _NotPlain(Exception):
    """The GeoJSON text holds something only GDAL's reader knows how to take."""


def _plain_object(pairs: list[tuple[str, object]]) -> dict:
    keys = [k for k, _ in pairs]
    if len({k.casefold() for k in keys}) != len(keys):
        raise _NotPlain  # keys repeated (in any case): which one GDAL keeps is its own rule
    return dict(pairs)


def _refuse_constant(name: str) -> float:
    raise _NotPlain  # NaN or Infinity: not JSON


def _read_plain_geojson(raw: bytes) -> gpd.GeoDataFrame | None:
    """The frame GDAL's reader gives for a plain FeatureCollection, or None for any other file.

    Plain: no ``crs`` member but CRS84's, no feature ``id``; every geometry a 2D Polygon or MultiPolygon;
    every feature with the same properties in the same order, each property holding only text
    (no dates), only whole numbers, or only numbers with gaps. Anything else, and any file
    this reader cannot parse, goes to GDAL, whose errors the caller words.
    """
    try:
        with _no_gc():
            return _plain_frame(raw)
    except (_NotPlain, ValueError, TypeError, KeyError, IndexError, AttributeError, RecursionError, shapely.errors.ShapelyError):
        return None


@contextmanager
def _no_gc() -> Iterator[None]:
    # The parse makes a list per coordinate pair, all kept until the frame is built: the cyclic
    # collector would walk them again and again to find nothing (it doubled the time on 1,000 blocks).
    enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if enabled:
            gc.enable()


def _plain_frame(raw: bytes) -> gpd.GeoDataFrame | None:
    """:func:`_read_plain_geojson`'s work; raises _NotPlain (or the parser's errors) for other files."""
    data = json.loads(raw, object_pairs_hook=_plain_object, parse_constant=_refuse_constant)
    features = data["features"] if isinstance(data, dict) else None
    if (
        data.get("type") != "FeatureCollection"
        or not data.keys() <= {"type", "features", "name", "bbox", "crs"}
        or data.get("crs", _CRS84) != _CRS84
        or not isinstance(features, list)
        or not features
    ):
        return None
    names = _plain_properties(features)
    columns = {name: _plain_column([f["properties"].get(name) for f in features]) for name in names}
    geoms = _plain_geometries(features)
    return gpd.GeoDataFrame(columns, geometry=geoms, crs="EPSG:4326")


_POLYGON_TYPES = {"Polygon": 3, "MultiPolygon": 6}


def _plain_geometries(features: list) -> np.ndarray:
    """The features' polygons, made from their coordinate lists in a few array calls.

    Every ring must be closed, of at least 4 finite 2D points (else _NotPlain: GDAL's
    reader and its errors take the file).
    """
    rings: list = []
    rings_per_part: list[int] = []
    parts_per_feature: list[int] = []
    for feature in features:
        geometry = feature["geometry"]
        parts = [geometry["coordinates"]] if geometry["type"] == "Polygon" else geometry["coordinates"]
        parts_per_feature.append(len(parts))
        for part in parts:
            rings_per_part.append(len(part))
            rings.extend(part)
    if not rings or 0 in parts_per_feature or 0 in rings_per_part:
        raise _NotPlain  # an empty geometry
    lengths = np.fromiter(map(len, rings), dtype=np.int64, count=len(rings))
    coords = np.concatenate([np.asarray(ring, dtype=np.float64) for ring in rings])
    ends = np.cumsum(lengths)
    if (
        coords.ndim != 2
        or coords.shape[1] != 2
        or lengths.min() < 4
        or not np.isfinite(coords).all()
        or not (coords[ends - lengths] == coords[ends - 1]).all()
    ):
        raise _NotPlain  # Z, an open or short ring, a coordinate past the float range
    shells = shapely.linearrings(coords, indices=np.repeat(np.arange(len(rings)), lengths))
    polygons = shapely.polygons(shells, indices=np.repeat(np.arange(len(rings_per_part)), rings_per_part))
    multi = np.array([f["geometry"]["type"] == "MultiPolygon" for f in features])
    owner = np.repeat(np.arange(len(features)), parts_per_feature)
    out = np.empty(len(features), dtype=object)
    out[~multi] = polygons[~multi[owner]]
    if multi.any():
        rank = np.cumsum(multi) - 1
        out[multi] = shapely.multipolygons(polygons[multi[owner]], indices=rank[owner[multi[owner]]])
    return out


def _plain_properties(features: list) -> list[str]:
    """The first feature's property names: every other feature has them, or some of them in the
    same order (a missing one is a gap, as in GDAL). Raises _NotPlain for features of another shape.
    """
    first = features[0].get("properties") if isinstance(features[0], dict) else None
    names = list(first) if isinstance(first, dict) else []
    folded = [n.casefold() for n in names]
    if not names or "" in names or "geometry" in folded or len(set(folded)) != len(folded):
        raise _NotPlain
    position = {name: i for i, name in enumerate(names)}
    for feature in features:
        geometry = feature.get("geometry") if isinstance(feature, dict) else None
        if (
            feature.keys() - {"type", "properties", "geometry", "bbox"}
            or feature.get("type") != "Feature"
            or not isinstance(geometry, dict)
            or geometry.keys() - {"type", "coordinates", "bbox"}
            or geometry.get("type") not in _POLYGON_TYPES
            or not isinstance(feature.get("properties"), dict)
            or len(_first_vertex(geometry)) != 2  # a Z file (its Z dropped with a note by GDAL's path)
        ):
            raise _NotPlain
        # GDAL places a field first met later by rules of its own: only the first feature's order.
        order = [position.get(name, -1) for name in feature["properties"]]
        if -1 in order or order != sorted(order):
            raise _NotPlain
    return names


def _first_vertex(geometry: dict) -> list:
    coordinates = geometry["coordinates"]
    return coordinates[0][0] if geometry["type"] == "Polygon" else coordinates[0][0][0]


def _plain_column(values: list) -> np.ndarray | pd.Series:
    """A property's values as GDAL's reader types them: text, 32- or 64-bit integers, or reals."""
    kinds = {type(v) for v in values}
    if kinds <= {str, type(None)} and str in kinds:
        if any(_DATE_LIKE.match(v) for v in values if v is not None):
            raise _NotPlain
        return pd.Series(values)
    if kinds == {int}:
        low, high = min(values), max(values)
        if _INT32[0] <= low and high <= _INT32[1]:
            return np.array(values, dtype=np.int32)
        if -(2**63) <= low and high < 2**63:
            return np.array(values, dtype=np.int64)
        raise _NotPlain
    if kinds <= {int, float, type(None)} and float in kinds:
        return np.array([np.nan if v is None else v for v in values], dtype=np.float64)
    raise _NotPlain


def _gpkg_layer(path: Path, layer: str | None) -> str | None:
    """The GeoPackage layer to read: the one asked for (any case), else ``blocks``, else the only one."""
    import pyogrio

    try:
        listed = pyogrio.list_layers(path)
    except Exception as err:  # pyogrio raises several unrelated types
        first = str(err).strip().splitlines()[0] if str(err).strip() else type(err).__name__
        raise InputError(f"{path}: cannot read as a GeoPackage ({first}); check the file") from None
    layers = [str(row[0]) for row in listed]
    described = ", ".join(
        f"{name} ({kind})" if kind else f"{name} (table)"
        for name, kind in ((str(r[0]), r[1]) for r in listed)
    )
    if layer is not None:
        if layer in layers:
            return layer
        same = [name for name in layers if name.casefold() == layer.casefold()]
        if len(same) == 1:
            return same[0]
        raise InputError(
            f"{path}: no layer {layer!r}; the GeoPackage's layers are: {described or 'none'}; "
            "choose one with --layer"
        )
    if "blocks" in layers:
        return "blocks"
    if len(layers) > 1:
        raise InputError(f"{path}: GeoPackage has several layers ({described}); choose one with --layer")
    return None


def _drop_z(frame: gpd.GeoDataFrame, path: Path, notes: list[str]) -> gpd.GeoDataFrame:
    geoms = np.asarray(frame.geometry.values)
    has_z = shapely.has_z(geoms)
    if has_z.any():
        flat = gpd.GeoSeries(shapely.force_2d(geoms), crs=frame.crs, index=frame.index)
        frame = frame.set_geometry(flat)
        notes = [
            *notes,
            f"{path}: dropped the Z (height) coordinates of {plural(int(has_z.sum()), 'feature')}; "
            "fieldplan works on the ground plane",
        ]
    frame.attrs["notes"] = notes
    return frame


def _feature_label(frame: pd.DataFrame, index: int, id_field: str | None) -> str:
    if id_field is not None and id_field in frame.columns:
        return f"feature {index + 1} ({id_field}={frame[id_field].iloc[index]!r})"
    return f"feature {index + 1}"


def _did_you_mean(name: str, columns: list[str]) -> str:
    close = difflib.get_close_matches(name.casefold(), [c.casefold() for c in columns], n=1, cutoff=0.6)
    if not close:
        return ""
    match = next(c for c in columns if c.casefold() == close[0])
    return f"did you mean {match!r}? "


def _match_field(frame: pd.DataFrame, path: Path, name: str, option: str) -> str:
    """The file's field called ``name``: exactly, else in another case; else a clear error."""
    columns = [str(c) for c in frame.columns if c != "geometry"]
    if name in columns:
        return name
    same = [c for c in columns if c.casefold() == name.casefold()]
    if len(same) == 1:
        return same[0]
    if len(same) > 1:
        raise InvalidBlocksError(
            f"{path}: {option}: fields {', '.join(same)} differ only in case; name one exactly"
        )
    raise InvalidBlocksError(
        f"{path}: {option}: no field {name!r}; {_did_you_mean(name, columns)}"
        f"fields are: {', '.join(columns) or 'none'}"
    )


def _pick_id_field(frame: gpd.GeoDataFrame, path: Path, id_field: str | None) -> str:
    columns = [c for c in frame.columns if c != "geometry"]
    if id_field is not None:
        return _match_field(frame, path, id_field, f"--id-field {id_field}")
    lower = {c.lower(): c for c in columns}
    for candidate in ID_CANDIDATES:
        if candidate in lower:
            return lower[candidate]
    raise InvalidBlocksError(
        f"{path}: no block id field (looked for {', '.join(ID_CANDIDATES)}); "
        f"name one with --id-field or --column block=FIELD (fields are: {', '.join(columns) or 'none'})"
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
        if (np.abs(lon) > 360).any():
            x, y = lon[np.argmax(np.abs(lon).max(axis=1))]
            raise InvalidBlocksError(
                f"{path}: coordinates such as ({x:.0f}, {y:.0f}) are not longitude/latitude, but the file "
                "says (or, as GeoJSON, implies) WGS84; reproject it to WGS84 or save it with its real CRS"
            )
        # Names the axis out of range (a latitude past 90, or a longitude past 180 at the antimeridian).
        check_lonlat_range(frame.geometry.values, path, lambda i: _feature_label(frame, i, id_field))
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


def _keep_polygons(
    frame: gpd.GeoDataFrame, geoms: np.ndarray, path: Path, id_field: str, notes: list[str]
) -> tuple[gpd.GeoDataFrame, np.ndarray]:
    """Skip features that are not polygons (a gate pin, a track) with one note; refuse a file of none.

    A collection keeps its polygonal part, if it has one.
    """
    kinds = frame.geometry.geom_type.to_numpy(dtype=object)
    collections = np.flatnonzero(kinds == "GeometryCollection")
    if len(collections):
        parts = np.array([_polygonal_part(geoms[i]) for i in collections], dtype=object)
        keep_part = ~shapely.is_empty(parts)
        geoms = geoms.copy()
        geoms[collections[keep_part]] = parts[keep_part]
        kinds = kinds.copy()
        kinds[collections[keep_part]] = [g.geom_type for g in parts[keep_part]]
    polygonal = np.isin(kinds, list(_POLYGONAL))
    if not polygonal.any():
        found = ", ".join(sorted(set(kinds)))
        raise InvalidBlocksError(
            f"{path}: no polygons (found {found}); blocks must be drawn as polygons, not points or lines"
        )
    skipped = np.flatnonzero(~polygonal)
    if len(skipped):
        listed = ", ".join(f"{_feature_label(frame, int(i), id_field)} ({kinds[i]})" for i in skipped[:5])
        more = ", ..." if len(skipped) > 5 else ""
        notes.append(
            f"{path}: skipped {plural(len(skipped), 'feature')} that {'is' if len(skipped) == 1 else 'are'} "
            f"not a polygon: {listed}{more}; "
            "blocks are the polygons"
        )
    if len(skipped) or len(collections):
        keep = np.flatnonzero(polygonal)
        frame = frame.iloc[keep].reset_index(drop=True)
        geoms = geoms[keep]
        frame = frame.set_geometry(gpd.GeoSeries(geoms, crs=frame.crs, index=frame.index))
    return frame, geoms


def _check_geometries(
    frame: gpd.GeoDataFrame, path: Path, id_field: str, repair: bool, notes: list[str]
) -> tuple[gpd.GeoDataFrame, dict[int, object]]:
    """Refuse empty, flat and (unless ``repair``) invalid features; skip non-polygons with a note.

    Returns the frame (repaired where asked) and the repaired features' original geometries.
    """
    repaired: dict[int, object] = {}
    geoms = np.asarray(frame.geometry.values)
    missing = np.flatnonzero(shapely.is_missing(geoms) | shapely.is_empty(geoms))
    if len(missing) == len(frame):
        raise InvalidBlocksError(f"{path}: every geometry is empty; export the block boundaries again")
    if len(missing):
        raise InvalidBlocksError(
            f"{path}: {_feature_label(frame, int(missing[0]), id_field)} has an empty geometry; "
            "delete it or redraw the block"
        )
    frame, geoms = _keep_polygons(frame, geoms, path, id_field, notes)
    _check_coordinates(frame, geoms, path, id_field)
    valid = shapely.is_valid(geoms)
    flat = np.flatnonzero(_zero_area(geoms, valid))
    if len(flat):
        raise InvalidBlocksError(
            f"{path}: {_feature_label(frame, int(flat[0]), id_field)} has zero area (its corners lie on "
            "one line or on one spot); redraw it as a polygon or remove it"
        )
    invalid = np.flatnonzero(~valid)
    if len(invalid):
        if not repair:
            i = int(invalid[0])
            reason = _readable_reason(shapely.is_valid_reason(geoms[i]))
            raise InvalidBlocksError(
                f"{path}: {_feature_label(frame, i, id_field)} is not a valid polygon ({reason}); "
                "fix the outline or pass --repair to repair it with shapely.make_valid"
            )
        fixed = shapely.make_valid(geoms[invalid])
        # make_valid can return collections with stray lines; only the polygonal part is a block.
        fixed = np.array([_polygonal_part(g) for g in fixed], dtype=object)
        repaired = {int(i): geoms[i] for i in invalid}
        geoms = geoms.copy()
        geoms[invalid] = fixed
        frame = frame.set_geometry(gpd.GeoSeries(geoms, crs=frame.crs, index=frame.index))
    return frame, repaired


def _check_coordinates(frame, geoms: np.ndarray, path: Path, id_field: str) -> None:
    """Refuse NaN, infinite and absurdly large coordinates, which break every geometry operation."""
    xy, owner = shapely.get_coordinates(geoms, return_index=True)
    # No map projection gives metres beyond 1e8, and degrees stop at 360.
    bad = ~np.isfinite(xy).all(axis=1) | (np.abs(xy) > _MAX_COORD).any(axis=1)
    if bad.any():
        k = int(np.argmax(bad))
        x, y = xy[k]
        raise InvalidBlocksError(
            f"{path}: {_feature_label(frame, int(owner[k]), id_field)} has a vertex at ({x:g}, {y:g}), "
            "which is not a usable coordinate; fix that vertex or redraw the feature"
        )


def _readable_reason(reason: str) -> str:
    """``'Self-intersection[15.00066 47.85379]'`` -> ``'self-intersection near 15.00066, 47.85379'``."""
    match = re.fullmatch(r"\s*([^\[]+)\[\s*(\S+)\s+(\S+)\s*\]\s*", reason or "")
    if match is None:
        return reason
    what, x, y = match.groups()
    try:
        where = f"{float(x):.6f}, {float(y):.6f}"
    except ValueError:
        return reason
    return f"{what.strip().lower()} near {where} in file coordinates"


def _zero_area(geoms: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """True where a polygon encloses nothing, even after repair (collinear or repeated corners)."""
    area = shapely.area(geoms)
    # make_valid leaves a valid polygon as it is, so only the invalid ones need repairing first.
    broken = np.flatnonzero(~valid)
    if len(broken):
        fixed = shapely.make_valid(geoms[broken])
        area[broken] = [shapely.area(_polygonal_part(g)) for g in fixed]
    minx, miny, maxx, maxy = shapely.bounds(geoms).T
    scale = np.maximum(maxx - minx, maxy - miny) ** 2
    return area <= 1e-12 * np.where(scale > 0, scale, 1.0)


def _area_text(m2: float) -> str:
    return f"{m2 / 10_000:.4f} ha ({m2:,.0f} m²)"


def _repair_notes(
    repaired: dict[int, object], frame: gpd.GeoDataFrame, path: Path, id_field: str, local, file_crs
) -> list[str]:
    """Notes on repaired features with their area as drawn and after repair, in metric units."""
    if not repaired:
        return []
    index = np.array(sorted(repaired), dtype=int)
    drawn = gpd.GeoSeries([repaired[i] for i in index], crs=file_crs).to_crs(local.crs)
    before = shapely.area(drawn.values)
    after = shapely.area(local.geometry.values[index])
    return [
        f"{path}: repaired {_feature_label(frame, int(i), id_field)} with shapely.make_valid "
        f"(it crossed itself): area as drawn {_area_text(b)} -> after repair {_area_text(a)}, "
        f"change {a - b:+,.0f} m²; check the outline"
        for i, b, a in zip(index, before, after, strict=True)
    ]


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


def _numeric_column(
    frame: gpd.GeoDataFrame, column: str | None, name: str, path: Path, id_field: str
) -> np.ndarray:
    if column is None:
        return np.full(len(frame), np.nan)
    raw = frame[column]
    if pd.api.types.is_float_dtype(raw.dtype) or pd.api.types.is_integer_dtype(raw.dtype):
        return raw.to_numpy(dtype=float, na_value=np.nan)  # numbers already: nothing to parse
    values = pd.to_numeric(raw, errors="coerce").to_numpy(dtype=float)
    bad = np.flatnonzero(
        np.isnan(values) & raw.notna().to_numpy() & (raw.astype(str).str.strip() != "").to_numpy()
    )
    if len(bad):
        i = int(bad[0])
        shown = name if column == name else f"{name} (field {column})"
        raise InvalidBlocksError(
            f"{path}: {_feature_label(frame, i, id_field)} has {shown}={raw.iloc[i]!r}, not a number; "
            "fix the value or leave it empty"
        )
    return values


def check_columns(columns: dict[str, str] | None) -> dict[str, str]:
    """Validate a role -> field mapping (``--column ROLE=SOURCE``); return it with roles in lower case.

    A role in :data:`COLUMN_ROLES` fills that plan column; any other role is a name
    (letters, digits, underscores) the field is read under, e.g. ``zone=MgmtZone``
    for ``--strata-by zone``.

    Raises
    ------
    OptionError
        Naming the ``columns`` parameter (``--column``) for a malformed role, a role
        named like a column the plan writes itself, an empty field name, or one field
        given two roles.
    """
    if columns is None:
        return {}
    if not isinstance(columns, dict):
        raise OptionError(f"--column (columns): expected ROLE=FIELD pairs, got {columns!r}")
    reserved = {c for c in PLAN_COLUMNS if c not in COLUMN_ROLES.values()}
    out: dict[str, str] = {}
    for role, source in columns.items():
        key = str(role).strip().lower().replace("-", "_")
        if not re.fullmatch(r"[a-z][a-z0-9_]*", key):
            raise OptionError(
                f"--column (columns): role {role!r} is not a name; roles are: {', '.join(COLUMN_ROLES)}, "
                "or a name of letters, digits and underscores"
            )
        if key in reserved:
            raise OptionError(
                f"--column (columns): {key!r} is a column the plan writes itself; choose another name"
            )
        if not isinstance(source, str) or not source.strip():
            raise OptionError(f"--column (columns): role {key!r} needs a field name, got {source!r}")
        if key in out:
            raise OptionError(f"--column (columns): role {key!r} is given twice")
        out[key] = source.strip()
    fields = [f.casefold() for f in out.values()]
    twice = sorted({f for f in fields if fields.count(f) > 1})
    if twice:
        raise OptionError(f"--column (columns): field {twice[0]!r} is given more than one role")
    return out


def check_length_unit(length_unit: str) -> str:
    """Validate the unit of the spacing attributes (``--length-unit``); return its key."""
    unit = str(length_unit).strip().lower()
    aliases = {"metre": "m", "meter": "m", "feet": "ft", "foot": "ft", "yard": "yd", "yards": "yd"}
    unit = aliases.get(unit, unit)
    if unit not in LENGTH_UNITS:
        raise OptionError(
            f"--length-unit (length_unit): {length_unit!r} is not a unit; use one of {', '.join(LENGTH_UNITS)}"
        )
    return unit


def _role_sources(
    frame: gpd.GeoDataFrame, path: Path, columns: dict[str, str], id_field: str | None
) -> dict[str, str | None]:
    """The file's field for each role: as mapped, else found by its usual name."""
    if id_field is not None and "block" in columns and columns["block"].casefold() != id_field.casefold():
        raise OptionError(
            f"--id-field {id_field!r} and --column block={columns['block']} name different fields; give one"
        )
    sources: dict[str, str | None] = {}
    for role in columns:
        if role not in COLUMN_ROLES:
            sources[role] = _match_field(frame, path, columns[role], f"--column {role}={columns[role]}")
    for role, target in COLUMN_ROLES.items():
        if role in columns:
            sources[role] = _match_field(frame, path, columns[role], f"--column {role}={columns[role]}")
        elif role == "block":
            sources[role] = _pick_id_field(frame, path, id_field)
        else:
            sources[role] = _find_column(frame, target)
    return sources


def _carry_columns(out: gpd.GeoDataFrame, frame: gpd.GeoDataFrame, used: set[str]) -> dict[str, str]:
    """Copy the file's other fields onto ``out``; rename those whose name the plan uses.

    Names are compared case-insensitively (GeoPackage and Shapefile field names
    are). Returns ``{file field: new name}`` for the renamed ones.
    """
    reserved = {c.casefold() for c in PLAN_COLUMNS}
    taken = {str(c).casefold() for c in out.columns}
    renamed: dict[str, str] = {}
    for column in frame.columns:
        if column == frame.geometry.name or column in used:
            continue
        name = str(column)
        if name.casefold() in reserved or name.casefold() in taken:
            new, k = RENAME_PREFIX + name, 2
            while new.casefold() in reserved or new.casefold() in taken:
                new, k = f"{RENAME_PREFIX}{k}_{name}", k + 1
            renamed[name] = new
            name = new
        out[name] = frame[column].to_numpy()
        taken.add(name.casefold())
    return renamed


def read_blocks(
    path: str | Path,
    *,
    layer: str | None = None,
    id_field: str | None = None,
    repair: bool = False,
    crs: CRS | None = None,
    columns: dict[str, str] | None = None,
    length_unit: str = "m",
    crop_profile: str | None = None,
    max_blocks: int | None = DEFAULT_MAX_BLOCKS,
    overlaps: str = "refuse",
) -> gpd.GeoDataFrame:
    """Read block boundaries into a GeoDataFrame in a local metric CRS.

    Parameters
    ----------
    path : str or Path
        GeoJSON, GeoPackage, Shapefile, zipped Shapefile, KML or KMZ.
    layer : str, optional
        GeoPackage layer; needed when the file holds several and none is ``blocks``.
        Matched case-insensitively; a missing layer's error lists the layers.
    id_field : str, optional
        Field holding block ids; default: the first of ``block, block_id, id, name``.
        Matched case-insensitively.
    repair : bool
        Repair invalid polygons with :func:`shapely.make_valid` instead of stopping.
    crs : pyproj.CRS, optional
        Metric CRS to use; default: the UTM zone of the blocks' centre.
    columns : dict, optional
        The file's field for a role, ``{role: field}``; roles are the keys of
        :data:`COLUMN_ROLES` (``block, variety, row_spacing, plant_spacing,
        row_bearing, crop, stratum``). Unmapped roles are found by their usual names.
    length_unit : {"m", "ft", "yd", "us-ft"}
        Unit of the row and plant spacing fields; converted to metres.
    crop_profile : str, optional
        Crop profile (shipped name or TOML file) whose spacing range checks blocks
        without a ``crop`` value matching a profile.
    max_blocks : int, optional
        Refuse a file with more features, counted before reading
        (:data:`fieldplan.limits.DEFAULT_MAX_BLOCKS`); ``None`` for no limit.
    overlaps : {"refuse", "first"}
        Blocks overlapping beyond a sliver are refused, or each overlap stays in
        the block listed first (:func:`fieldplan.overlaps.resolve_overlaps`).

    Returns
    -------
    geopandas.GeoDataFrame
        Columns ``block, variety, row_spacing_m, plant_spacing_m, row_bearing_deg, geometry``
        (and ``crop``, ``stratum`` when the file has them) plus the file's other attributes,
        in natural order of block id. ``attrs`` holds ``source``, ``sha256``, ``notes``
        (for the user), ``id_field``, ``source_fields``, ``source_crs``,
        ``renamed_columns`` and ``read_params`` (the non-default ``columns`` and
        ``length_unit``, for the plan's parameters).

    Raises
    ------
    InvalidBlocksError
        For any problem of the file, naming the feature and the fix; among them a
        row or plant spacing outside the plausible range of the block's crop profile.
    OptionError
        For a bad ``columns`` or ``length_unit`` (the message names the parameter).
    """
    from fieldplan.sorting import natural_order

    path = Path(path)
    columns = check_columns(columns)
    unit = check_length_unit(length_unit)
    frame = read_frame(path, layer=layer, max_features=max_blocks)
    notes: list[str] = list(frame.attrs.get("notes", []))
    if len(frame) == 0:
        raise InvalidBlocksError(f"{path}: holds no features; export the block boundaries again")
    source_fields = [str(c) for c in frame.columns if c != frame.geometry.name]
    if path.suffix.lower() in (".kml", ".kmz") and id_field is None and "block" not in columns:
        id_field = "name"  # a placemark's name is its block id, whatever its ExtendedData holds
    sources = _role_sources(frame, path, columns, id_field)
    id_name = sources["block"]
    frame, repaired = _check_geometries(frame, path, id_name, repair, notes)
    file_crs = frame.crs if frame.crs is not None else WGS84
    frame, crs_notes = _resolve_crs(frame, path, id_name)
    notes.extend(crs_notes)
    ids = _check_ids(frame, path, id_name)
    clean_names(ids, path)  # no control characters, no ids thousands of characters long

    wgs = frame if CRS.from_user_input(frame.crs).is_geographic else frame.to_crs(WGS84)
    # Blocks across the antimeridian are unwrapped (longitudes past 180) before anything
    # measures them; a projected file is projected back as it was.
    unwrapped, changed = unwrap_longitudes(wgs.geometry.values)
    if changed:
        wgs = wgs.set_geometry(gpd.GeoSeries(unwrapped, index=wgs.index, crs=wgs.crs))
        frame = wgs if CRS.from_user_input(frame.crs).is_geographic else frame
    _check_far_features(wgs, path, id_name)
    if crs is None:
        minx, miny, maxx, maxy = wgs.total_bounds
        # UTM, or near a pole a projection centred on the blocks.
        crs = local_crs_for((minx + maxx) / 2.0, (miny + maxy) / 2.0)
    local = frame.to_crs(crs)
    notes.extend(_repair_notes(repaired, frame, path, id_name, local, file_crs))
    # Overlapping blocks would be sampled and weighted twice: refused, or given to the first.
    clipped, overlap_notes = resolve_overlaps(
        local.geometry.values, ids.to_numpy(dtype=object), path, mode=overlaps
    )
    if overlap_notes:
        local = local.set_geometry(gpd.GeoSeries(clipped, index=local.index, crs=local.crs))
        notes.extend(overlap_notes)

    area = shapely.area(local.geometry.values)
    tiny = np.flatnonzero(area <= 1e-6)
    if len(tiny):
        raise InvalidBlocksError(
            f"{path}: {_feature_label(frame, int(tiny[0]), id_name)} has zero area; redraw it or remove it"
        )

    factor = LENGTH_UNITS[unit]
    data: dict[str, np.ndarray] = {
        "block": ids.to_numpy(dtype=object),
        "variety": _text_column(frame, sources["variety"]),
        "row_spacing_m": _numeric_column(frame, sources["row_spacing"], "row_spacing_m", path, id_name)
        * factor,
        "plant_spacing_m": _numeric_column(frame, sources["plant_spacing"], "plant_spacing_m", path, id_name)
        * factor,
        "row_bearing_deg": _numeric_column(frame, sources["row_bearing"], "row_bearing_deg", path, id_name),
    }
    for role in ("crop", "stratum"):
        if sources[role] is not None:
            data[role] = _text_column(frame, sources[role])
    for role in columns:
        if role not in COLUMN_ROLES:  # a field renamed for --strata-by and the like
            data[role] = frame[sources[role]].to_numpy()
    if "stratum" in data:
        blank = np.flatnonzero(pd.isna(pd.Series(data["stratum"], dtype=object)).to_numpy())
        if len(blank) == len(frame) and "stratum" not in columns:
            # A field named stratum that no block fills (KML ExtendedData of the skipped
            # points, say) is no stratification: each block stays its own stratum.
            del data["stratum"]
        elif len(blank):
            raise InvalidBlocksError(
                f"{path}: {_feature_label(frame, int(blank[0]), id_name)} has no stratum in field "
                f"{sources['stratum']!r}; fill it in or map another field with --column stratum=FIELD"
            )
    out = gpd.GeoDataFrame(data, geometry=local.geometry.values, crs=crs)
    used = {s for s in sources.values() if s is not None}
    renamed = _carry_columns(out, frame, used)
    if renamed:
        listed = ", ".join(f"{old} -> {new}" for old, new in renamed.items())
        notes.append(
            f"{path}: kept {plural(len(renamed), 'field')} named like a column the plan writes itself "
            f"under a new name: {listed}"
        )
    out = out.iloc[natural_order(out["block"].tolist())].reset_index(drop=True)
    mapped = {role: sources[role] for role in columns}
    if unit != "m" and (sources["row_spacing"] or sources["plant_spacing"]):
        notes.append(
            f"{path}: row and plant spacings read in {unit} and converted to metres "
            f"(1 {unit} = {factor:.10g} m)"
        )
    check_spacing_profiles(out, path, crop_profile=crop_profile, sources=sources, length_unit=unit)
    notes.extend(check_row_attributes(out, path, needed=False, fields=tuple(ROW_LIMITS)))
    read_params: dict = {}
    if mapped:
        read_params["columns"] = dict(sorted(mapped.items()))
    if unit != "m":
        read_params["length_unit"] = unit
    source_crs = CRS.from_user_input(file_crs)
    out.attrs.update(
        source=str(path),
        sha256=file_sha256(path),
        notes=notes,
        id_field=id_name,
        source_fields=source_fields,
        source_crs=source_crs.to_string() if source_crs.is_projected else None,
        renamed_columns=renamed,
        read_params=read_params,
    )
    return out


def check_spacing_profiles(
    blocks: pd.DataFrame,
    path: str | Path | None = None,
    *,
    crop_profile: str | None = None,
    sources: dict[str, str | None] | None = None,
    length_unit: str = "m",
) -> None:
    """Refuse a row or plant spacing outside the plausible range of the block's crop profile.

    A block's profile is the shipped profile whose ``crops`` list holds its ``crop``
    value (case-insensitive), else ``crop_profile``; blocks with neither are checked
    only against the wide :data:`ROW_LIMITS`. The message names the block, the
    value, the range and its source, and suggests ``--length-unit ft`` when the
    value reads as a plausible spacing in feet.
    """
    from fieldplan.samples.profiles import load_profile, shipped_profiles

    source = path if path is not None else blocks.attrs.get("source", "blocks")
    profiles = [load_profile(name) for name in shipped_profiles()]
    by_crop = {crop.casefold(): p for p in profiles for crop in p.crops}
    fallback = load_profile(crop_profile) if crop_profile is not None else None
    candidates = [*profiles, fallback]  # the last is "no profile" when fallback is None
    index_of = {crop: profiles.index(p) for crop, p in by_crop.items()}
    n = len(blocks)
    if "crop" in blocks.columns:
        # One look-up per distinct crop value, not per block.
        codes, uniques = pd.factorize(blocks["crop"], use_na_sentinel=True)
        per_value = np.array(
            [index_of.get(str(v).strip().casefold(), len(profiles)) for v in uniques] + [len(profiles)],
            dtype=int,
        )
        which = per_value[codes]  # code -1 (no crop) takes the last entry: no profile
    else:
        which = np.full(n, len(profiles), dtype=int)
    names = blocks["block"].astype(str).to_numpy()
    for name, role in (("row_spacing_m", "row_spacing"), ("plant_spacing_m", "plant_spacing")):
        if name not in blocks.columns:
            continue
        ranges = np.array(
            [
                getattr(p, name, None) or (np.nan, np.nan) if p is not None else (np.nan, np.nan)
                for p in candidates
            ],
            dtype=float,
        )
        low, high = ranges[which, 0], ranges[which, 1]
        values = pd.to_numeric(blocks[name], errors="coerce").to_numpy(dtype=float)
        bad = np.flatnonzero(
            np.isfinite(values) & (values > 0) & np.isfinite(low) & ((values < low) | (values > high))
        )
        if not len(bad):
            continue
        i = int(bad[0])
        profile = candidates[which[i]]
        value = float(values[i])
        more = f" (and {len(bad) - 1} more)" if len(bad) > 1 else ""
        field = (sources or {}).get(role)
        origin = f" (field {field}" + (f", read in {length_unit}" if length_unit != "m" else "") + ")"
        origin = origin if field and (field != name or length_unit != "m") else ""
        raise InvalidBlocksError(
            f"{source}: block {names[i]!r}{more} has {name}={value:.4g}{origin}, outside {low[i]:g} to "
            f"{high[i]:g} m for {profile.name} ({profile.spacing_basis}); "
            f"{_unit_hint(value, low[i], high[i], length_unit)}"
        )


def _unit_hint(value: float, low: float, high: float, length_unit: str) -> str:
    metres = LENGTH_UNITS[length_unit]
    if length_unit == "m" and low <= value * LENGTH_UNITS["ft"] <= high:
        return "the file probably gives feet: pass --length-unit ft, or fix the value"
    if length_unit == "m" and low <= value * LENGTH_UNITS["yd"] <= high:
        return "the file probably gives yards: pass --length-unit yd, or fix the value"
    if length_unit != "m" and low <= value / metres <= high:
        return "the file probably gives metres: drop --length-unit, or fix the value"
    return "fix the value in the file or check its unit (--length-unit)"


def check_row_attributes(
    blocks: pd.DataFrame,
    path: str | Path | None = None,
    *,
    needed: bool,
    fields: tuple[str, ...] = ("row_spacing_m", "plant_spacing_m"),
    allow_missing: bool = False,
) -> list[str]:
    """Check the row-model attributes of blocks (spacings in metres, bearing in degrees).

    Plausible ranges are in :data:`ROW_LIMITS`. When a design needs the row model
    (``needed=True``), a missing, zero, negative or implausible value raises;
    otherwise the problems come back as notes for the user, one per field.

    Parameters
    ----------
    blocks : pandas.DataFrame
        Blocks with a ``block`` column and the ``fields`` columns (as from :func:`read_blocks`).
    path : str or Path, optional
        File the blocks came from, for the message; default ``blocks.attrs["source"]``.
    needed : bool
        Whether the plan cannot be made without these values.
    fields : tuple of str
        Which of :data:`ROW_LIMITS` to check.
    allow_missing : bool
        With ``needed``, let blocks without a value pass (a design that leaves
        them out with a flag) while a value given but implausible still raises.

    Returns
    -------
    list of str
        Notes (empty when every value is plausible).

    Raises
    ------
    InvalidBlocksError
        If ``needed`` and a block lacks a plausible value.
    """
    source = path if path is not None else blocks.attrs.get("source", "blocks")
    notes: list[str] = []
    names = blocks["block"].astype(str).to_numpy()
    for name in fields:
        low, high = ROW_LIMITS[name]
        unit = "degrees" if name.endswith("_deg") else "m"
        values = (
            pd.to_numeric(blocks[name], errors="coerce").to_numpy(dtype=float)
            if name in blocks.columns
            else np.full(len(blocks), np.nan)
        )
        missing = ~np.isfinite(values)
        absent = np.zeros(len(values), bool) if allow_missing else missing
        positive_only = unit == "m"
        not_positive = ~missing & (values <= 0) if positive_only else np.zeros(len(values), bool)
        outside = ~missing & ~not_positive & ((values < low) | (values > high))
        if needed:
            for kind, mask in (("missing", absent), ("not positive", not_positive), ("outside", outside)):
                hits = np.flatnonzero(mask)
                if len(hits):
                    i = int(hits[0])
                    more = f" (and {len(hits) - 1} more)" if len(hits) > 1 else ""
                    raise InvalidBlocksError(
                        f"{source}: block {names[i]!r}{more} "
                        + _row_problem(kind, name, values[i], low, high, unit)
                        + (_fields_hint(blocks, name) if kind == "missing" else "")
                    )
            continue
        bad = np.flatnonzero(not_positive | outside)
        if len(bad):
            listed = ", ".join(f"{names[i]}={values[i]:g}" for i in bad[:3])
            more = ", ..." if len(bad) > 3 else ""
            notes.append(
                f"{source}: {name} outside {low:g} to {high:g} {unit} in {len(bad)} block(s) "
                f"({listed}{more}); fix them before planning with a design that uses rows"
            )
    return notes


_ROLE_OF = {target: role for role, target in COLUMN_ROLES.items()}


def _fields_hint(blocks: pd.DataFrame, name: str) -> str:
    """Where the file names the value otherwise: its fields, and the option that maps one."""
    fields = blocks.attrs.get("source_fields")
    if fields is None:
        fields = [str(c) for c in blocks.columns if c != "geometry"]
    role = _ROLE_OF.get(name)
    mapping = f", or map the file's field with --column {role}=FIELD" if role else ""
    return f"{mapping} (the file's fields: {', '.join(fields) or 'none'})"


def row_fields_hint(blocks: pd.DataFrame) -> str:
    """``"; map the file's fields with --column ... (the file's fields: ...)"`` for a missing row layout."""
    fields = blocks.attrs.get("source_fields")
    if fields is None:
        fields = [str(c) for c in blocks.columns if c != "geometry"]
    return (
        "; map the file's fields with --column row_spacing=FIELD --column plant_spacing=FIELD "
        f"--column row_bearing=FIELD (the file's fields: {', '.join(fields) or 'none'})"
    )


def _row_problem(kind: str, name: str, value: float, low: float, high: float, unit: str) -> str:
    if kind == "missing":
        return f"has no {name}; add it ({unit}) to every block this design samples"
    if kind == "not positive":
        return f"has {name}={value:g}, which is not positive; fix the value in the file"
    return f"has {name}={value:g}, outside the usual {low:g} to {high:g} {unit}; fix the value in the file"


def _text_column(frame: gpd.GeoDataFrame, column: str | None) -> np.ndarray:
    if column is None:
        return np.full(len(frame), None, dtype=object)
    values = frame[column]
    if isinstance(values.dtype, pd.StringDtype):
        # Strings or missing values already: the same as the general case below, in one step.
        return values.to_numpy(dtype=object, na_value=None)
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
    void = shapely.is_missing(geoms) | shapely.is_empty(geoms)
    if void.any():
        raise InputError(
            f"{path}: exclusion feature {int(np.argmax(void)) + 1} has an empty geometry; "
            "delete it or redraw it"
        )
    _check_coordinates(frame, geoms, path, None)
    bad = np.flatnonzero(~kinds.isin(list(_POLYGONAL)).to_numpy())
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
    out.attrs["notes"] = list(frame.attrs.get("notes", []))  # e.g. Z dropped, for the plan's notes
    return out


def select_blocks(blocks: gpd.GeoDataFrame, expression: str) -> gpd.GeoDataFrame:
    """Keep the blocks whose attribute matches ``FIELD=VALUE[,VALUE...]`` (case-insensitive text).

    Examples: ``crop=wine grape``, ``variety=Syrah,Pinotage``, ``block=V01,V02``.
    """
    source = blocks.attrs.get("source", "blocks")
    field, sep, values = expression.partition("=")
    field = field.strip()
    if not sep or not field or not values.strip():
        raise OptionError(f"--select takes FIELD=VALUE[,VALUE...], e.g. crop=wine grape; got {expression!r}")
    column = _find_column(blocks, field.lower()) if field.lower() != "block" else "block"
    if column is None:
        fields = ", ".join(c for c in blocks.columns if c != "geometry")
        raise OptionError(f"{source}: no field {field!r} to select on; fields are: {fields}")
    wanted = {v.strip().casefold() for v in values.split(",") if v.strip()}
    keep = blocks[column].map(lambda v: v is not None and str(v).strip().casefold() in wanted).to_numpy(bool)
    if not keep.any():
        raise OptionError(f"{source}: no block has {field} in {sorted(wanted)}; check the values in the file")
    out = blocks[keep].reset_index(drop=True)
    out.attrs.update(blocks.attrs)
    return out
