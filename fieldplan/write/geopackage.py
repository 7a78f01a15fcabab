"""A small GeoPackage 1.4 encoder: a new file's layers written in one SQLite transaction.

Writes what GDAL's GPKG driver (through pyogrio) writes for the same frames, so
readers see the same layers, columns, types, values, CRS and feature ids, but
without GDAL's feature-by-feature path: geometries are encoded as
GeoPackageBinary blobs in one vectorised pass (a numpy header per row and
shapely's WKB), rows go in with ``executemany``, and the spatial index is
bulk-loaded (sort-tile-recursive packing) into SQLite's R*Tree tables instead
of being built one insert at a time.

What it writes (OGC 12-128r18, GeoPackage 1.4.0):

- ``application_id`` 0x47504B47 ('GPKG') and ``user_version`` 10400 (Req 2);
- ``gpkg_spatial_ref_sys`` with the rows -1, 0 and 4326 (Req 10, 11) and the
  layers' CRS as OGC WKT 1 (``definition``), under its authority and code when
  it has one, else under organisation ``NONE`` and a private id from 100000;
- ``gpkg_contents`` (Req 13-16, 18): ``features`` or ``attributes``, the
  table name as identifier, ``last_change`` as ``%Y-%m-%dT%H:%M:%fZ`` (Req 15),
  the bounds of the non-empty geometries;
- ``gpkg_geometry_columns`` (Req 21-28) and feature tables with an
  ``INTEGER PRIMARY KEY AUTOINCREMENT`` id, one geometry column ``geom`` whose
  declared type is the layer's geometry type (Req 29-31);
- GeoPackageBinary geometries (Req 19, 20): 'GP', version 0, flags (empty bit,
  envelope code, little-endian), srs_id, envelope [minx, maxx, miny, maxy]
  except for points (as GDAL writes them), then WKB; an empty geometry has the
  empty bit set and no envelope (Req 149), an empty point NaN coordinates;
- the ``gpkg_rtree_index`` extension (Annex F.3): the virtual table
  ``rtree_<t>_geom``, its seven triggers (the 1.4 set) and the ``gpkg_extensions``
  row, so GDAL and QGIS keep the index in step when they later edit rows;
- GDAL's own ``gpkg_ogr_contents`` feature counts and their triggers, and the
  empty tile-matrix tables GDAL creates, so a file reads (and is appended to)
  like one GDAL made.

Columns are typed as pyogrio maps pandas dtypes: bool -> BOOLEAN; int8, uint8,
int16 -> SMALLINT; uint16, int32 -> MEDIUMINT; int64, uint32, uint64 -> INTEGER;
float32 -> FLOAT; float64 -> REAL; text -> TEXT; datetime64 (naive or UTC) ->
DATETIME; NaN, None and NaT -> NULL. A frame holding anything else raises
:class:`Unsupported`, and the caller writes that layer through GDAL.
"""

from __future__ import annotations

import math
import os
import sqlite3
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    import geopandas as gpd
    import pandas as pd
    from pyproj import CRS

__all__ = [
    "APPLICATION_ID",
    "USER_VERSION",
    "GeoPackage",
    "Unsupported",
    "geometry_blobs",
    "column_values",
]

#: 'GPKG' in ASCII (OGC 12-128r18, Requirement 2).
APPLICATION_ID = 0x47504B47
#: GeoPackage 1.4.0 (major, two-digit minor, two-digit patch; Requirement 2).
USER_VERSION = 10400
#: Private srs_id values start here (GDAL's choice too, above every EPSG code).
PRIVATE_SRS_ID = 100000

#: Rows bound into one INSERT, and SQLite's default cap on bound values (3.32 and later).
_ROWS_PER_STATEMENT = 128
_MAX_VARIABLES = 32766

#: Bound in place of a null and turned into NULL by NULLIF (private-use characters; a text
#: column holding it as a value binds its nulls as None instead).
_NULL = "\ue000\uf8ffnull\uf8ff\ue000"

_RTREE_EXTENSION = "http://www.geopackage.org/spec120/#extension_rtree"


class Unsupported(ValueError):
    """A frame this encoder does not write exactly as GDAL would (the caller uses GDAL)."""


# --- schema ---------------------------------------------------------------------------------

_CORE_SCHEMA = """
CREATE TABLE gpkg_spatial_ref_sys (srs_name TEXT NOT NULL,srs_id INTEGER NOT NULL PRIMARY KEY,
organization TEXT NOT NULL,organization_coordsys_id INTEGER NOT NULL,definition  TEXT NOT NULL,
description TEXT);
CREATE TABLE gpkg_contents (table_name TEXT NOT NULL PRIMARY KEY,data_type TEXT NOT NULL,
identifier TEXT UNIQUE,description TEXT DEFAULT '',
last_change DATETIME NOT NULL DEFAULT (strftime('%Y-%m-%dT%H:%M:%fZ','now')),min_x DOUBLE, min_y DOUBLE,
max_x DOUBLE, max_y DOUBLE,srs_id INTEGER,
CONSTRAINT fk_gc_r_srs_id FOREIGN KEY (srs_id) REFERENCES gpkg_spatial_ref_sys(srs_id));
CREATE TABLE gpkg_ogr_contents(table_name TEXT NOT NULL PRIMARY KEY,feature_count INTEGER DEFAULT NULL);
CREATE TABLE gpkg_geometry_columns (table_name TEXT NOT NULL,column_name TEXT NOT NULL,
geometry_type_name TEXT NOT NULL,srs_id INTEGER NOT NULL,z TINYINT NOT NULL,m TINYINT NOT NULL,
CONSTRAINT pk_geom_cols PRIMARY KEY (table_name, column_name),CONSTRAINT uk_gc_table_name UNIQUE (table_name),
CONSTRAINT fk_gc_tn FOREIGN KEY (table_name) REFERENCES gpkg_contents(table_name),
CONSTRAINT fk_gc_srs FOREIGN KEY (srs_id) REFERENCES gpkg_spatial_ref_sys (srs_id));
CREATE TABLE gpkg_tile_matrix_set (table_name TEXT NOT NULL PRIMARY KEY,srs_id INTEGER NOT NULL,
min_x DOUBLE NOT NULL,min_y DOUBLE NOT NULL,max_x DOUBLE NOT NULL,max_y DOUBLE NOT NULL,
CONSTRAINT fk_gtms_table_name FOREIGN KEY (table_name) REFERENCES gpkg_contents(table_name),
CONSTRAINT fk_gtms_srs FOREIGN KEY (srs_id) REFERENCES gpkg_spatial_ref_sys (srs_id));
CREATE TABLE gpkg_tile_matrix (table_name TEXT NOT NULL,zoom_level INTEGER NOT NULL,
matrix_width INTEGER NOT NULL,matrix_height INTEGER NOT NULL,tile_width INTEGER NOT NULL,
tile_height INTEGER NOT NULL,pixel_x_size DOUBLE NOT NULL,pixel_y_size DOUBLE NOT NULL,
CONSTRAINT pk_ttm PRIMARY KEY (table_name, zoom_level),
CONSTRAINT fk_tmm_table_name FOREIGN KEY (table_name) REFERENCES gpkg_contents(table_name));
"""

# Annex F.1 (tiles): the checks on gpkg_tile_matrix values, as GDAL adds them.
_TILE_CHECKS = (
    ("zoom_level", "INSERT", "zoom_level cannot be less than 0", "(NEW.zoom_level < 0)"),
    ("zoom_level", "UPDATE of zoom_level", "zoom_level cannot be less than 0", "(NEW.zoom_level < 0)"),
    ("matrix_width", "INSERT", "matrix_width cannot be less than 1", "(NEW.matrix_width < 1)"),
    (
        "matrix_width",
        "UPDATE OF matrix_width",
        "matrix_width cannot be less than 1",
        "(NEW.matrix_width < 1)",
    ),
    ("matrix_height", "INSERT", "matrix_height cannot be less than 1", "(NEW.matrix_height < 1)"),
    (
        "matrix_height",
        "UPDATE OF matrix_height",
        "matrix_height cannot be less than 1",
        "(NEW.matrix_height < 1)",
    ),
    ("pixel_x_size", "INSERT", "pixel_x_size must be greater than 0", "NOT (NEW.pixel_x_size > 0)"),
    (
        "pixel_x_size",
        "UPDATE OF pixel_x_size",
        "pixel_x_size must be greater than 0",
        "NOT (NEW.pixel_x_size > 0)",
    ),
    ("pixel_y_size", "INSERT", "pixel_y_size must be greater than 0", "NOT (NEW.pixel_y_size > 0)"),
    (
        "pixel_y_size",
        "UPDATE OF pixel_y_size",
        "pixel_y_size must be greater than 0",
        "NOT (NEW.pixel_y_size > 0)",
    ),
)

_WGS84_WKT = (
    'GEOGCS["WGS 84",DATUM["WGS_1984",SPHEROID["WGS 84",6378137,298.257223563,AUTHORITY["EPSG","7030"]],'
    'AUTHORITY["EPSG","6326"]],PRIMEM["Greenwich",0,AUTHORITY["EPSG","8901"]],'
    'UNIT["degree",0.0174532925199433,AUTHORITY["EPSG","9122"]],AXIS["Latitude",NORTH],'
    'AXIS["Longitude",EAST],AUTHORITY["EPSG","4326"]]'
)
# Requirement 11: the three records every GeoPackage holds.
_REQUIRED_SRS = (
    (
        "Undefined Cartesian SRS",
        -1,
        "NONE",
        -1,
        "undefined",
        "undefined Cartesian coordinate reference system",
    ),
    (
        "Undefined geographic SRS",
        0,
        "NONE",
        0,
        "undefined",
        "undefined geographic coordinate reference system",
    ),
    (
        "WGS 84 geodetic",
        4326,
        "EPSG",
        4326,
        _WGS84_WKT,
        "longitude/latitude coordinates in decimal degrees on the WGS 84 spheroid",
    ),
)


def _q(name: str) -> str:
    """An SQL identifier in double quotes."""
    return '"' + name.replace('"', '""') + '"'


def _lit(text: str) -> str:
    """An SQL string literal."""
    return "'" + text.replace("'", "''") + "'"


def _rtree_sql(table: str, column: str = "geom", fid: str = "fid") -> list[str]:
    """The rtree table and its triggers (OGC 12-128r18 Annex F.3, the GeoPackage 1.4 set)."""
    t, c, i = _q(table), _q(column), _q(fid)
    r = _q(f"rtree_{table}_{column}")
    name = f"rtree_{table}_{column}"
    bounds = f"ST_MinX(NEW.{c}), ST_MaxX(NEW.{c}),ST_MinY(NEW.{c}), ST_MaxY(NEW.{c})"
    new_full = f"(NEW.{c} NOTNULL AND NOT ST_IsEmpty(NEW.{c}))"
    new_none = f"(NEW.{c} ISNULL OR ST_IsEmpty(NEW.{c}))"
    return [
        f"CREATE VIRTUAL TABLE {r} USING rtree(id, minx, maxx, miny, maxy)",
        f"CREATE TRIGGER {_q(name + '_insert')} AFTER INSERT ON {t} "
        f"WHEN (new.{c} NOT NULL AND NOT ST_IsEmpty(NEW.{c})) "
        f"BEGIN INSERT OR REPLACE INTO {r} VALUES (NEW.{i},{bounds}); END",
        f"CREATE TRIGGER {_q(name + '_update6')} AFTER UPDATE OF {c} ON {t} "
        f"WHEN OLD.{i} = NEW.{i} AND {new_full} AND (OLD.{c} NOTNULL AND NOT ST_IsEmpty(OLD.{c})) "
        f"BEGIN UPDATE {r} SET minx = ST_MinX(NEW.{c}), maxx = ST_MaxX(NEW.{c}),"
        f"miny = ST_MinY(NEW.{c}), maxy = ST_MaxY(NEW.{c}) WHERE id = NEW.{i};END",
        f"CREATE TRIGGER {_q(name + '_update7')} AFTER UPDATE OF {c} ON {t} "
        f"WHEN OLD.{i} = NEW.{i} AND {new_full} AND (OLD.{c} ISNULL OR ST_IsEmpty(OLD.{c})) "
        f"BEGIN INSERT INTO {r} VALUES (NEW.{i},{bounds}); END",
        f"CREATE TRIGGER {_q(name + '_update2')} AFTER UPDATE OF {c} ON {t} "
        f"WHEN OLD.{i} = NEW.{i} AND {new_none} "
        f"BEGIN DELETE FROM {r} WHERE id = OLD.{i}; END",
        f"CREATE TRIGGER {_q(name + '_update5')} AFTER UPDATE ON {t} "
        f"WHEN OLD.{i} != NEW.{i} AND {new_full} "
        f"BEGIN DELETE FROM {r} WHERE id = OLD.{i}; INSERT OR REPLACE INTO {r} VALUES (NEW.{i},{bounds}); END",
        f"CREATE TRIGGER {_q(name + '_update4')} AFTER UPDATE ON {t} "
        f"WHEN OLD.{i} != NEW.{i} AND {new_none} "
        f"BEGIN DELETE FROM {r} WHERE id IN (OLD.{i}, NEW.{i}); END",
        f"CREATE TRIGGER {_q(name + '_delete')} AFTER DELETE ON {t} WHEN old.{c} NOT NULL "
        f"BEGIN DELETE FROM {r} WHERE id = OLD.{i}; END",
    ]


def _count_triggers(table: str) -> list[str]:
    """GDAL's triggers keeping gpkg_ogr_contents.feature_count in step with plain SQL edits."""
    t, lit = _q(table), _lit(table)
    return [
        f"CREATE TRIGGER {_q('trigger_insert_feature_count_' + table)} AFTER INSERT ON {t} "
        f"BEGIN UPDATE gpkg_ogr_contents SET feature_count = feature_count + 1 "
        f"WHERE lower(table_name) = lower({lit}); END",
        f"CREATE TRIGGER {_q('trigger_delete_feature_count_' + table)} AFTER DELETE ON {t} "
        f"BEGIN UPDATE gpkg_ogr_contents SET feature_count = feature_count - 1 "
        f"WHERE lower(table_name) = lower({lit}); END",
    ]


# --- columns --------------------------------------------------------------------------------

_INT_TYPES = {
    "int8": "SMALLINT",
    "uint8": "SMALLINT",
    "int16": "SMALLINT",
    "uint16": "MEDIUMINT",
    "int32": "MEDIUMINT",
    "int64": "INTEGER",
    "uint32": "INTEGER",
    "uint64": "INTEGER",
}


def _with_nulls(values: list, null: np.ndarray) -> list:
    if null.any():
        for k in np.flatnonzero(null).tolist():
            values[k] = None
    return values


def _datetime_text(series: pd.Series, name: str) -> list:
    """GDAL's DATETIME text: ``YYYY-MM-DDTHH:MM:SS[.sss]`` with ``Z`` for UTC."""
    tz = getattr(series.dtype, "tz", None)
    if tz is not None and str(tz) != "UTC":
        raise Unsupported(f"column {name!r}: time zone {tz} (GDAL writes offsets)")
    values = series.dt.tz_localize(None) if tz is not None else series
    null = values.isna().to_numpy()
    ns = values.to_numpy(dtype="datetime64[ns]").astype("int64")
    ok = ns[~null]
    if (ok % 1_000_000).any():
        raise Unsupported(f"column {name!r}: times finer than a millisecond")
    years = values.dt.year.to_numpy()[~null]
    if len(years) and (years.min() < 1000 or years.max() > 9999):
        raise Unsupported(f"column {name!r}: years outside 1000-9999")
    whole = values.dt.strftime("%Y-%m-%dT%H:%M:%S").to_numpy(dtype=object).tolist()
    ms = ((ns // 1_000_000) % 1000).tolist()
    suffix = "Z" if tz is not None else ""
    # GDAL gives milliseconds only when there are some.
    out = [f"{w}.{m:03d}{suffix}" if m else f"{w}{suffix}" for w, m in zip(whole, ms, strict=True)]
    return _with_nulls(out, null)


def _numbers(series: pd.Series, name: str) -> tuple[str, list] | None:
    """Booleans, integers and floats as GDAL types them; None for other dtypes."""
    import pandas as pd

    dtype = series.dtype
    numpy_dtype = dtype if isinstance(dtype, np.dtype) else getattr(dtype, "numpy_dtype", None)
    if pd.api.types.is_bool_dtype(dtype):
        null = series.isna().to_numpy()
        return "BOOLEAN", _with_nulls(series.to_numpy(dtype=np.int64, na_value=0).tolist(), null)
    if pd.api.types.is_integer_dtype(dtype):
        sql = _INT_TYPES.get(str(numpy_dtype))
        if sql is None:
            raise Unsupported(f"column {name!r}: integer dtype {dtype}")
        null = series.isna().to_numpy()
        raw = series.to_numpy(dtype=numpy_dtype, na_value=0)
        if numpy_dtype == np.uint64 and len(raw) and raw.max() > np.iinfo(np.int64).max:
            raise Unsupported(f"column {name!r}: unsigned values beyond 64-bit signed")
        return sql, _with_nulls(raw.tolist(), null)
    if pd.api.types.is_float_dtype(dtype):
        if numpy_dtype not in (np.float32, np.float64):
            raise Unsupported(f"column {name!r}: float dtype {dtype}")
        # NaN stays: SQLite binds it as NULL, which is what GDAL writes for NaN.
        raw = series.to_numpy(dtype=numpy_dtype, na_value=np.nan)
        return ("FLOAT" if numpy_dtype == np.float32 else "REAL"), raw.tolist()
    return None


def _object_text(series: pd.Series, name: str) -> list:
    """An object column of strings (None or NaN for missing) as TEXT values."""
    import pandas as pd

    values = series.to_numpy()
    kind = pd.api.types.infer_dtype(values, skipna=True)
    if kind not in ("string", "empty"):
        raise Unsupported(f"column {name!r}: object values of kind {kind}")
    null = pd.isna(values)
    # pyogrio writes None and float NaN as NULL but pd.NA as the text '<NA>'.
    if null.any() and any(v is not None and not isinstance(v, float) for v in values[null].tolist()):
        raise Unsupported(f"column {name!r}: missing values other than None and NaN")
    return _with_nulls(values.tolist(), null)


def _no_nul(values: list, name: str) -> list:
    """``values`` unless a text holds NUL, which GDAL's C strings would cut short there."""
    if "\x00" in "".join(filter(None, values)):
        raise Unsupported(f"column {name!r}: text with NUL characters")
    return values


def _numpy_numbers(raw: np.ndarray, name: str) -> tuple[str, list]:
    """A plain numpy bool, integer or float column, without pandas' dtype checks (costlier here)."""
    dtype = raw.dtype
    if dtype.kind == "b":
        return "BOOLEAN", raw.astype(np.int64).tolist()
    if dtype.kind == "f":
        if dtype not in (np.float32, np.float64):
            raise Unsupported(f"column {name!r}: float dtype {dtype}")
        # NaN stays: SQLite binds it as NULL, which is what GDAL writes for NaN.
        return ("FLOAT" if dtype == np.float32 else "REAL"), raw.tolist()
    sql = _INT_TYPES.get(dtype.name)
    if sql is None or (dtype == np.uint64 and len(raw) and raw.max() > np.iinfo(np.int64).max):
        raise Unsupported(f"column {name!r}: integer dtype {dtype} or values beyond 64-bit signed")
    return sql, raw.tolist()


def column_values(series: pd.Series, name: str) -> tuple[str, list]:
    """The GeoPackage type of a column and its values ready to bind (None for null).

    Raises :class:`Unsupported` for a dtype GDAL would write differently.
    """
    import pandas as pd

    dtype = series.dtype
    if isinstance(dtype, np.dtype) and dtype.kind in "biuf":
        return _numpy_numbers(series.to_numpy(), name)
    if isinstance(dtype, pd.CategoricalDtype):
        raise Unsupported(f"column {name!r}: categorical")
    typed = _numbers(series, name)
    if typed is not None:
        return typed
    if pd.api.types.is_datetime64_any_dtype(dtype):
        return "DATETIME", _datetime_text(series, name)
    if isinstance(dtype, pd.StringDtype):
        return "TEXT", _no_nul(
            _with_nulls(series.to_numpy(dtype=object).tolist(), series.isna().to_numpy()), name
        )
    if pd.api.types.is_object_dtype(dtype):
        return "TEXT", _no_nul(_object_text(series, name), name)
    raise Unsupported(f"column {name!r}: dtype {dtype}")


# --- geometries -----------------------------------------------------------------------------

_SINGLE_TO_MULTI = {0: 4, 1: 5, 3: 6}  # shapely type ids: Point, LineString, Polygon
_LAYER_TYPES = {
    "Unknown": "GEOMETRY",
    "Point": "POINT",
    "LineString": "LINESTRING",
    "Polygon": "POLYGON",
    "MultiPoint": "MULTIPOINT",
    "MultiLineString": "MULTILINESTRING",
    "MultiPolygon": "MULTIPOLYGON",
}


def layer_geometry_type(geoms: np.ndarray, geometry_type: str | None) -> tuple[str, bool]:
    """The layer's declared geometry type and whether single parts are promoted to multi.

    Follows pyogrio's rules for a GeoPackage: a declared type is kept, and
    single parts are promoted when it is a multi type; otherwise one type is
    taken as it is, a single and a multi type of one kind become the multi type,
    anything else is ``Unknown`` (GEOMETRY).
    """
    import shapely

    types = shapely.get_type_id(geoms)
    present = set(np.unique(types[types >= 0]).tolist())
    if geometry_type is None:
        pairs = {
            frozenset({0, 4}): "MultiPoint",
            frozenset({1, 5}): "MultiLineString",
            frozenset({3, 6}): "MultiPolygon",
        }
        names = {
            0: "Point",
            1: "LineString",
            2: "LinearRing",
            3: "Polygon",
            4: "MultiPoint",
            5: "MultiLineString",
            6: "MultiPolygon",
            7: "GeometryCollection",
        }
        if len(present) == 1:
            geometry_type, promote = names[present.pop()], False
        elif frozenset(present) in pairs:
            geometry_type, promote = pairs[frozenset(present)], True
        else:
            geometry_type, promote = "Unknown", False
    else:
        promote = geometry_type.startswith("Multi")
    if geometry_type not in _LAYER_TYPES:
        raise Unsupported(f"geometry type {geometry_type}")
    if present - {0, 1, 3, 4, 5, 6}:
        raise Unsupported("linear rings or geometry collections")
    return geometry_type, promote


def geometry_blobs(
    geoms: np.ndarray, srs_id: int, *, promote: bool = False
) -> tuple[list, np.ndarray, np.ndarray]:
    """GeoPackageBinary blobs of ``geoms`` (OGC 12-128r18 clause 2.1.3, Requirement 19).

    Returns the blobs (None for a missing geometry), the envelope of each
    geometry as ``[minx, maxx, miny, maxy]`` rows, and a mask of the
    geometries that go into a spatial index (present and not empty).

    Points carry no envelope (as GDAL writes them); other types the XY
    envelope (code 1); empty geometries set the empty flag and carry none
    (Requirement 149). With ``promote``, points, lines and polygons are
    written as one-part multi geometries, as GDAL's promotion does.
    """
    import shapely

    geoms = np.asarray(geoms, dtype=object)
    n = len(geoms)
    present = ~shapely.is_missing(geoms)
    empty = present & shapely.is_empty(geoms)
    types = shapely.get_type_id(geoms)
    if shapely.has_z(geoms[present]).any():
        raise Unsupported("geometries with Z")
    if n and (types == 0).all() and not empty.any() and not promote:
        return _point_blobs(geoms, srs_id)
    wkb = shapely.to_wkb(geoms, byte_order=1, output_dimension=2, flavor="iso")
    promoted = np.zeros(n, dtype=bool)
    if promote:
        promoted = np.isin(types, list(_SINGLE_TO_MULTI))
    out_types = types.copy()
    for single, multi in _SINGLE_TO_MULTI.items():
        out_types[promoted & (types == single)] = multi
    with_envelope = present & ~empty & (out_types != 0)
    bounds = shapely.bounds(geoms)  # minx, miny, maxx, maxy (NaN for missing or empty)
    envelope = bounds[:, [0, 2, 1, 3]]

    flags = np.full(n, 0x01, dtype=np.uint8)  # little-endian header values
    flags[empty] |= 0x10
    flags[with_envelope] |= 0x02  # envelope code 1: [minx, maxx, miny, maxy]
    plain = np.zeros(n, dtype=[("magic", "S2"), ("version", "u1"), ("flags", "u1"), ("srs_id", "<i4")])
    plain["magic"] = b"GP"
    plain["flags"] = flags
    plain["srs_id"] = srs_id
    heads = plain.view("V8").tolist()
    if with_envelope.any():
        env = np.zeros(n, dtype=[("head", "V8"), ("env", "<f8", 4)])
        env["head"] = plain.view("V8")
        env["env"] = envelope
        long_heads = env.view("V40").tolist()
        heads = [long_heads[k] if e else heads[k] for k, e in enumerate(with_envelope.tolist())]
    wkb_list = wkb.tolist()
    if promoted.any():
        for single, multi in _SINGLE_TO_MULTI.items():
            prefix = (
                b"\x01" + np.uint32(multi).tobytes() + np.uint32(1).tobytes()
            )  # WKB code = shapely id here
            for k in np.flatnonzero(promoted & (types == single)).tolist():
                wkb_list[k] = prefix + wkb_list[k]
    # bytearray: the sqlite3 module binds it directly, bytes only after an adapter lookup.
    blobs = [bytearray(h) + w if w is not None else None for h, w in zip(heads, wkb_list, strict=True)]
    return blobs, envelope, present & ~empty


def _as_text(value: float) -> float:
    """``value`` after the trip through SQL text GDAL gives a ``gpkg_contents`` bound.

    GDAL writes the bounds with SQLite's ``printf('%.17g')``, which rounds to 18
    significant digits and then to at most 16 by the 17th digit alone (half
    up), so a few bounds come back one unit in the last place off the double.
    """
    mantissa, exponent = f"{float(value):.17e}".split("e")
    sign = "-" if mantissa.startswith("-") else ""
    digits = mantissa.lstrip("-").replace(".", "")
    head = int(digits[:16]) + (digits[16] >= "5")
    return float(f"{sign}{head}e{int(exponent) - 15}")


def _point_blobs(points: np.ndarray, srs_id: int) -> tuple[list, np.ndarray, np.ndarray]:
    """:func:`geometry_blobs` of non-empty 2D points, written field by field in one array."""
    import shapely

    xy = shapely.get_coordinates(points)
    rows = np.zeros(
        len(points),
        dtype=[
            ("magic", "S2"),
            ("version", "u1"),
            ("flags", "u1"),
            ("srs_id", "<i4"),
            ("order", "u1"),
            ("type", "<u4"),
            ("x", "<f8"),
            ("y", "<f8"),
        ],
    )
    rows["magic"] = b"GP"
    rows["flags"] = 0x01  # little-endian, no envelope, not empty
    rows["srs_id"] = srs_id
    rows["order"] = 1  # WKB little-endian
    rows["type"] = 1  # WKB Point
    rows["x"], rows["y"] = xy[:, 0], xy[:, 1]
    envelope = np.column_stack([xy[:, 0], xy[:, 0], xy[:, 1], xy[:, 1]])
    blobs = list(map(bytearray, rows.view(f"V{rows.itemsize}").tolist()))
    return blobs, envelope, np.ones(len(points), dtype=bool)


# --- spatial index ----------------------------------------------------------------------------

_RND_TOWARDS = 1.0 - 1.0 / 8388608.0
_RND_AWAY = 1.0 + 1.0 / 8388608.0


def _float32_down(d: np.ndarray) -> np.ndarray:
    """SQLite's rtreeValueDown: the float32 at or below each double."""
    f = d.astype(np.float32)
    over = f.astype(np.float64) > d
    if over.any():
        f[over] = (d[over] * np.where(d[over] < 0, _RND_AWAY, _RND_TOWARDS)).astype(np.float32)
    return f


def _float32_up(d: np.ndarray) -> np.ndarray:
    """SQLite's rtreeValueUp: the float32 at or above each double."""
    f = d.astype(np.float32)
    under = f.astype(np.float64) < d
    if under.any():
        f[under] = (d[under] * np.where(d[under] < 0, _RND_TOWARDS, _RND_AWAY)).astype(np.float32)
    return f


def _str_order(boxes: np.ndarray, fanout: int) -> np.ndarray:
    """Sort-tile-recursive order of boxes (Leutenegger et al. 1997): x slabs, y within a slab."""
    n = len(boxes)
    cx = (boxes[:, 0] + boxes[:, 1]) * 0.5
    cy = (boxes[:, 2] + boxes[:, 3]) * 0.5
    nodes = math.ceil(n / fanout)
    slab = math.ceil(math.sqrt(nodes)) * fanout
    by_x = np.argsort(cx, kind="stable")  # stable: ties (a grid has many) in the same order everywhere
    slab_of = np.empty(n, dtype=np.int64)
    slab_of[by_x] = np.arange(n) // slab
    # One sort on slab + y scaled into [0, 1): the slab decides, y orders within it.
    span = np.ptp(cy) if n else 0.0
    y01 = (cy - cy.min()) / (span * (1 + 1e-9)) if span > 0 else np.zeros(n)
    return np.argsort(slab_of + np.minimum(y01, 0.999999), kind="stable")


def _bulk_load_rtree(con: sqlite3.Connection, name: str, ids: np.ndarray, boxes: np.ndarray) -> None:
    """Fill an empty SQLite R*Tree (``rtree(id, minx, maxx, miny, maxy)``) in one pass.

    Writes the shadow tables as SQLite's rtree module lays them out: nodes of
    the root's size, a 2-byte depth (root only) and a 2-byte cell count, then
    cells of a big-endian 64-bit id and four big-endian float32 coordinates
    (minima rounded down, maxima up, as the module stores doubles); the
    ``_rowid`` table maps each id to its leaf, ``_parent`` each node but the
    root to its parent. The module then maintains the tree as usual.
    """
    if not len(ids):
        return
    node_size = con.execute(f"SELECT length(data) FROM {_q(name + '_node')} WHERE nodeno = 1").fetchone()[0]
    fanout = (node_size - 4) // 24
    f32 = np.column_stack(
        [
            _float32_down(boxes[:, 0]),
            _float32_up(boxes[:, 1]),
            _float32_down(boxes[:, 2]),
            _float32_up(boxes[:, 3]),
        ]
    )
    # Levels from the leaves up; above the leaves a cell's id is first the index of its
    # child in the level below, replaced by the child's node number once all are numbered.
    level_ids, level_boxes = np.asarray(ids, dtype=np.int64), f32
    levels: list[tuple[np.ndarray, np.ndarray, int]] = []
    while True:
        order = _str_order(level_boxes.astype(np.float64), fanout)
        level_ids, level_boxes = level_ids[order], level_boxes[order]
        count = math.ceil(len(level_ids) / fanout)
        levels.append((level_ids, level_boxes, count))
        if count == 1:
            break
        pad = count * fanout - len(level_ids)
        mins = np.pad(level_boxes[:, [0, 2]], ((0, pad), (0, 0)), constant_values=np.inf)
        maxs = np.pad(level_boxes[:, [1, 3]], ((0, pad), (0, 0)), constant_values=-np.inf)
        mins = mins.reshape(count, fanout, 2).min(axis=1)
        maxs = maxs.reshape(count, fanout, 2).max(axis=1)
        level_boxes = np.column_stack([mins[:, 0], maxs[:, 0], mins[:, 1], maxs[:, 1]]).astype(np.float32)
        level_ids = np.arange(count, dtype=np.int64)
    # Node numbers: the root is 1, the others 2, 3, ... from the leaves up.
    depth = len(levels) - 1
    numbers, next_no = [], 2
    for _, _, count in levels[:-1]:
        numbers.append(np.arange(next_no, next_no + count, dtype=np.int64))
        next_no += count
    numbers.append(np.array([1], dtype=np.int64))
    cell = np.dtype([("id", ">i8"), ("box", ">f4", 4)])
    node_rows: list[tuple[int, bytes]] = []
    parent_rows: list[tuple[int, int]] = []
    leaf_of = np.empty(0, dtype=np.int64)
    for k, (child, boxes_k, count) in enumerate(levels):
        child_ids = child if k == 0 else numbers[k - 1][child]
        cells = np.zeros(count * fanout, dtype=cell)
        cells["id"][: len(child_ids)] = child_ids
        cells["box"][: len(child_ids)] = boxes_k
        blobs = np.zeros((count, node_size), dtype=np.uint8)
        blobs[:, 4 : 4 + fanout * 24] = cells.view(np.uint8).reshape(count, fanout * 24)
        sizes = np.full(count, fanout, dtype=">u2")
        sizes[-1] = len(child_ids) - (count - 1) * fanout
        blobs[:, 2:4] = sizes.view(np.uint8).reshape(count, 2)
        if k == depth:
            blobs[0, 0:2] = np.array([depth], dtype=">u2").view(np.uint8)
        node_rows += zip(numbers[k].tolist(), [b.tobytes() for b in blobs], strict=True)
        owner = np.repeat(numbers[k], fanout)[: len(child_ids)]
        if k == 0:
            leaf_of = owner
        else:
            parent_rows += zip(child_ids.tolist(), owner.tolist(), strict=True)
    con.execute(f"DELETE FROM {_q(name + '_node')}")
    con.executemany(f"INSERT INTO {_q(name + '_node')} (nodeno, data) VALUES (?, ?)", sorted(node_rows))
    con.executemany(
        f"INSERT INTO {_q(name + '_parent')} (nodeno, parentnode) VALUES (?, ?)", sorted(parent_rows)
    )
    leaf_ids = levels[0][0]
    by_id = np.argsort(leaf_ids)  # ids are unique
    leaf_ids, leaf_of = leaf_ids[by_id], leaf_of[by_id]
    # Integers bind directly (no adapter lookup), many rows to a statement.
    _insert_columns(
        con, name + "_rowid", ["rowid", "nodeno"], [leaf_ids.tolist(), leaf_of.tolist()], len(leaf_ids)
    )


def _bindings(columns: list[str], values: list[list], count: int) -> tuple[list, list, list]:
    """How each column is bound by :func:`_insert_columns`.

    Returns the columns written, the varying ones as ``(slot, values, wrapped in
    NULLIF)`` and the constant ones as ``(slot, value)``, slots indexing the first.
    """
    kept: list[str] = []
    varying: list[tuple[int, list, bool]] = []
    constant: list[tuple[int, object]] = []
    for column, vals in zip(columns, values, strict=True):
        nulls = vals.count(None)
        if nulls == count:
            continue  # left to the column's default, NULL
        kept.append(column)
        first = vals[0]
        if not nulls and type(first) in (str, int) and vals.count(first) == count:
            constant.append((len(kept) - 1, first))
        elif nulls and _NULL not in vals:
            varying.append((len(kept) - 1, [_NULL if v is None else v for v in vals], True))
        else:
            varying.append((len(kept) - 1, vals, False))
    return kept, varying, constant


def _insert_columns(
    con: sqlite3.Connection, table: str, columns: list[str], values: list[list], count: int
) -> None:
    """Insert ``count`` rows given column by column (``values[j]`` is column ``j``), in rowid order.

    Binding values from Python is most of the cost, so: many rows go in each
    statement (a statement per row costs several times its binding, and with
    AUTOINCREMENT updates sqlite_sequence each time); a column of nothing but
    nulls is left to its default (NULL); a column holding one value throughout
    is bound once per statement; and a null elsewhere is bound as a marker
    string that ``NULLIF`` turns into NULL, because the sqlite3 module binds
    ``None`` (and ``bytes``) through its adapter lookup, several times slower
    than text. Floats keep NaN, which SQLite stores as NULL.
    """
    kept, varying, constant = _bindings(columns, values, count)
    quoted = _q(table)
    if not kept:
        con.executemany(f"INSERT INTO {quoted} DEFAULT VALUES", [()] * count)
        return
    # Constant columns first, as ?1, ?2, ...: each row's bare ? then number on from them.
    names = [kept[slot] for slot, _ in constant] + [kept[slot] for slot, _, _ in varying]
    cells = [f"?{k + 1}" for k in range(len(constant))]
    cells += [f"NULLIF(?,'{_NULL}')" if wrap else "?" for _, _, wrap in varying]
    head = f"INSERT INTO {quoted} ({', '.join(_q(c) for c in names)}) VALUES "
    group = "(" + ",".join(cells) + ")"
    width = len(varying)
    # Row-major values by slice assignment: no tuple per row.
    flat: list = [None] * (count * width)
    for k, (_, vals, _) in enumerate(varying):
        flat[k::width] = vals
    per = max(1, min(_ROWS_PER_STATEMENT, (_MAX_VARIABLES - len(constant)) // max(width, 1)))
    tail = [value for _, value in constant]
    full = count // per
    step = per * width
    if full:
        con.executemany(
            head + ",".join([group] * per), (tail + flat[k * step : (k + 1) * step] for k in range(full))
        )
    if count > full * per:
        con.execute(head + ",".join([group] * (count - full * per)), tail + flat[full * step :])


# --- the file -------------------------------------------------------------------------------


class GeoPackage:
    """A new GeoPackage being written in one transaction; :meth:`close` commits it.

    Parameters
    ----------
    path : pathlib.Path
        The file to create; must not exist.
    last_change : str
        ``gpkg_contents.last_change`` of every layer, ``%Y-%m-%dT%H:%M:%fZ``.
    spatial_index : bool
        Add the ``gpkg_rtree_index`` extension to every feature table.
    """

    def __init__(self, path: str | Path, *, last_change: str, spatial_index: bool = True) -> None:
        self.path = Path(path)
        if self.path.exists():
            raise FileExistsError(f"{self.path} exists; GeoPackage writes a new file only")
        self.last_change = last_change
        self.spatial_index = spatial_index
        self._srs: dict[str, int] = {}
        # No syncs (one fsync at close) and the journal in memory: the file is new and a failed
        # write discards it; the journal serves only to roll back a layer left to GDAL.
        self.con = sqlite3.connect(self.path, isolation_level=None)
        self.con.execute("PRAGMA journal_mode = MEMORY")
        self.con.execute("PRAGMA synchronous = OFF")
        self.con.execute(f"PRAGMA application_id = {APPLICATION_ID}")
        self.con.execute(f"PRAGMA user_version = {USER_VERSION}")
        # One transaction from here to close() (executescript would commit one begun before it).
        self.con.executescript("BEGIN;" + _CORE_SCHEMA)
        for column, event, message, check in _TILE_CHECKS:
            kind = "insert" if event == "INSERT" else "update"
            self.con.execute(
                f"CREATE TRIGGER 'gpkg_tile_matrix_{column}_{kind}' BEFORE {event} ON 'gpkg_tile_matrix' "
                f"FOR EACH ROW BEGIN SELECT RAISE(ABORT, '{kind} on table ''gpkg_tile_matrix'' violates "
                f"constraint: {message}') WHERE {check}; END"
            )
        self.con.executemany("INSERT INTO gpkg_spatial_ref_sys VALUES (?, ?, ?, ?, ?, ?)", _REQUIRED_SRS)
        self._extensions = False

    # -- spatial reference systems
    def srs_id(self, crs: CRS) -> int:
        """The srs_id of ``crs`` (a pyproj CRS), adding its ``gpkg_spatial_ref_sys`` row if new."""
        wkt = crs.to_wkt("WKT1_GDAL")
        if wkt in self._srs:
            return self._srs[wkt]
        authority = crs.to_authority()
        if authority is not None and authority[1].isdigit():
            row = self.con.execute(
                "SELECT srs_id FROM gpkg_spatial_ref_sys WHERE lower(organization) = lower(?) "
                "AND organization_coordsys_id = ?",
                (authority[0], int(authority[1])),
            ).fetchone()
            if row is not None:  # EPSG:4326 is there from the start
                self._srs[wkt] = row[0]
                return row[0]
        taken = {row[0] for row in self.con.execute("SELECT srs_id FROM gpkg_spatial_ref_sys")}
        if authority is not None and authority[1].isdigit() and int(authority[1]) not in taken:
            organisation, code = authority[0], int(authority[1])
            srs_id = code
        else:
            srs_id = max([PRIVATE_SRS_ID - 1, *taken]) + 1
            organisation, code = "NONE", srs_id
        self.con.execute(
            "INSERT INTO gpkg_spatial_ref_sys VALUES (?, ?, ?, ?, ?, NULL)",
            (crs.name, srs_id, organisation, code, wkt),
        )
        self._srs[wkt] = srs_id
        return srs_id

    # -- layers
    def _create_table(self, name: str, columns: list[tuple[str, str]], geometry: str | None) -> None:
        parts = ['"fid" INTEGER PRIMARY KEY AUTOINCREMENT NOT NULL']
        if geometry is not None:
            parts.append(f'"geom" {geometry}')
        parts += [f"{_q(col)} {sql}" for col, sql in columns]
        self.con.execute(f"CREATE TABLE {_q(name)} ( {', '.join(parts)})")

    def _check_names(self, name: str, columns: Sequence[str]) -> None:
        seen = {"fid", "geom"}
        for col in columns:
            if not isinstance(col, str) or col.lower() in seen:
                raise Unsupported(f"layer {name!r}: column name {col!r}")
            seen.add(col.lower())

    def _insert(self, name: str, columns: list[str], values: list[list], count: int) -> None:
        """Insert ``count`` rows given column by column (``values[j]`` is column ``j``); see :func:`_insert_columns`."""
        _insert_columns(self.con, name, columns, values, count)

    def _register(self, name: str, data_type: str, bounds: tuple, srs_id: int, count: int) -> None:
        self.con.execute(
            "INSERT INTO gpkg_contents (table_name, data_type, identifier, description, last_change, "
            "min_x, min_y, max_x, max_y, srs_id) VALUES (?, ?, ?, '', ?, ?, ?, ?, ?, ?)",
            (name, data_type, name, self.last_change, *bounds, srs_id),
        )
        self.con.execute("INSERT INTO gpkg_ogr_contents VALUES (?, ?)", (name, count))
        for sql in _count_triggers(name):
            self.con.execute(sql)

    def add_features(self, name: str, frame: gpd.GeoDataFrame, *, geometry_type: str | None = None) -> None:
        """Add a feature table from a GeoDataFrame (2D geometries, one geometry column)."""
        from pyproj import CRS

        if frame.crs is None:
            raise Unsupported(f"layer {name!r}: no CRS")
        geom_name = frame.geometry.name
        fields = [c for c in frame.columns if c != geom_name]
        self._check_names(name, fields)
        typed = [column_values(frame[c], c) for c in fields]
        geoms = np.asarray(frame.geometry.values, dtype=object)
        if len(geoms) == 0 and geometry_type is None:
            geometry_type = "Unknown"
        layer_type, promote = layer_geometry_type(geoms, geometry_type)
        srs_id = self.srs_id(CRS.from_user_input(frame.crs))
        blobs, envelope, indexed = geometry_blobs(geoms, srs_id, promote=promote)
        self._create_table(
            name, [(c, sql) for c, (sql, _) in zip(fields, typed, strict=True)], _LAYER_TYPES[layer_type]
        )
        self._insert(name, ["geom", *fields], [blobs, *(values for _, values in typed)], len(frame))
        if indexed.any():
            env = envelope[indexed]
            bounds = tuple(
                _as_text(v) for v in (env[:, 0].min(), env[:, 2].min(), env[:, 1].max(), env[:, 3].max())
            )
        else:
            bounds = (None, None, None, None)
        self._register(name, "features", bounds, srs_id, len(frame))
        self.con.execute(
            "INSERT INTO gpkg_geometry_columns VALUES (?, 'geom', ?, ?, 0, 0)",
            (name, _LAYER_TYPES[layer_type], srs_id),
        )
        if self.spatial_index:
            self._add_rtree(name, np.flatnonzero(indexed) + 1, envelope[indexed])

    def add_attributes(self, name: str, frame: pd.DataFrame) -> None:
        """Add an attribute table (no geometry) from a DataFrame."""
        import pandas as pd

        if any(
            isinstance(dtype, pd.api.extensions.ExtensionDtype) and dtype.name == "geometry"
            for dtype in frame.dtypes
        ):
            raise Unsupported(f"layer {name!r}: geometry column in a plain table")
        fields = list(frame.columns)
        self._check_names(name, fields)
        typed = [column_values(frame[c], c) for c in fields]
        self._create_table(name, [(c, sql) for c, (sql, _) in zip(fields, typed, strict=True)], None)
        self._insert(name, fields, [values for _, values in typed], len(frame))
        # GDAL records attribute tables under srs_id 0.
        self._register(name, "attributes", (None, None, None, None), 0, len(frame))

    def _add_rtree(self, name: str, ids: np.ndarray, envelope: np.ndarray) -> None:
        if not self._extensions:
            self.con.execute(
                "CREATE TABLE gpkg_extensions (table_name TEXT,column_name TEXT,extension_name TEXT NOT NULL,"
                "definition TEXT NOT NULL,scope TEXT NOT NULL,"
                "CONSTRAINT ge_tce UNIQUE (table_name, column_name, extension_name))"
            )
            self._extensions = True
        statements = _rtree_sql(name)
        self.con.execute(statements[0])
        _bulk_load_rtree(self.con, f"rtree_{name}_geom", ids, envelope)
        for sql in statements[1:]:
            self.con.execute(sql)
        self.con.execute(
            "INSERT INTO gpkg_extensions VALUES (?, 'geom', 'gpkg_rtree_index', ?, 'write-only')",
            (name, _RTREE_EXTENSION),
        )

    def close(self, *, commit: bool = True) -> None:
        """Commit (or abandon) the transaction, close the file and make it durable."""
        try:
            self.con.execute("COMMIT" if commit else "ROLLBACK")
        finally:
            self.con.close()
        if commit:
            fd = os.open(self.path, os.O_RDONLY)
            try:
                os.fsync(fd)
            finally:
                os.close(fd)
