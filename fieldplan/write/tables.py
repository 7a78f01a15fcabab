"""Plain outputs: points.geojson (RFC 7946), points.csv, summary.csv, manifest.json, README.txt."""

from __future__ import annotations

import json
import math
import re
from collections.abc import Iterator
from contextlib import contextmanager
from functools import lru_cache
from pathlib import Path

import numpy as np
import pandas as pd
import shapely
from pyproj import CRS, Transformer

from fieldplan.crs import WGS84
from fieldplan.safety import cautions_text, plan_cautions
from fieldplan.write.safe import _FORMULA_PREFIXES, atomic_write_bytes, atomic_write_text, neutralise_frame

__all__ = [
    "points_lonlat",
    "shared_lonlat",
    "write_points_geojson",
    "write_points_csv",
    "write_summary_csv",
    "write_manifest",
    "write_readme",
    "csv_xy_crs",
    "LONLAT_DECIMALS",
]

# 8 decimals of a degree is about 1 mm: finer than any GPS, coarse enough to be stable text.
LONLAT_DECIMALS = 8


# [points frame, its geometry array, lon/lat or None, lon/lat text or None] while
# :func:`shared_lonlat` is active.
_SHARED: list[list] = []


def points_lonlat(points) -> np.ndarray:
    """``(n, 2)`` WGS84 longitude/latitude of a GeoDataFrame's points, rounded for output."""
    for entry in _SHARED:
        if entry[0] is points and entry[1] is points.geometry.values:
            if entry[2] is None:
                entry[2] = _lonlat(points)
            return entry[2].copy()
    return _lonlat(points)


def _lonlat(points) -> np.ndarray:
    if len(points) == 0:
        return np.empty((0, 2))
    # Transform the coordinates only: GeoDataFrame.to_crs also builds new point
    # geometries, which costs more than the projection itself.
    xy = shapely.get_coordinates(points.geometry.values)
    transformer = _to_wgs84(points.crs)
    if transformer is not None:
        xy = np.column_stack(transformer.transform(xy[:, 0], xy[:, 1]))
    return np.round(xy, LONLAT_DECIMALS)


def _lonlat_text(points) -> tuple[np.ndarray, np.ndarray]:
    """``repr`` of each point's longitude and latitude (:func:`points_lonlat`), as object arrays.

    points.csv and points.geojson print the same numbers: inside :func:`shared_lonlat` they
    are formatted once. The arrays are shared: callers must not change them.
    """
    for entry in _SHARED:
        if entry[0] is points and entry[1] is points.geometry.values:
            if entry[3] is None:
                entry[3] = _repr_columns(points_lonlat(points))
            return entry[3]
    return _repr_columns(points_lonlat(points))


def _repr_columns(lonlat: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    return _repr(lonlat[:, 0]), _repr(lonlat[:, 1])


def _repr(numbers: np.ndarray) -> np.ndarray:
    """Python's shortest round-trip ``repr`` of each float (what json and pandas write)."""
    return np.array(list(map(repr, numbers.tolist())), dtype=object)


@lru_cache(maxsize=8)
def _to_wgs84(crs) -> Transformer | None:
    if crs is None or CRS.from_user_input(crs).equals(WGS84):
        return None
    return Transformer.from_crs(crs, WGS84, always_xy=True)


@contextmanager
def shared_lonlat(points):
    """Inside the block, :func:`points_lonlat` of ``points`` is computed once for all callers.

    Several writers of one plan need the same lon/lat; the projection is done once.
    A writer that replaces the geometry column gets a fresh computation. ``None``
    (a plan without points) shares nothing.
    """
    if points is None:
        yield
        return
    entry = [points, points.geometry.values, None, None]
    _SHARED.append(entry)
    try:
        yield
    finally:
        _SHARED[:] = [e for e in _SHARED if e is not entry]


def _json_value(value):
    if value is None:
        return None
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, pd.Timestamp):
        return value.isoformat()
    return value


def _geojson_text_records(points, lonlat: np.ndarray) -> str:
    """The FeatureCollection through ``json.dumps``; the reference for the fast path."""
    columns = [c for c in points.columns if c != "geometry"]
    records = points[columns].to_dict(orient="records")
    features = []
    for (lon, lat), props in zip(lonlat, records, strict=True):
        features.append(
            {
                "type": "Feature",
                "properties": {k: _json_value(v) for k, v in props.items()},
                "geometry": {"type": "Point", "coordinates": [float(lon), float(lat)]},
            }
        )
    collection = {"type": "FeatureCollection", "features": features}
    return json.dumps(collection, ensure_ascii=False, indent=None) + "\n"


def _json_column(values: pd.Series) -> tuple[np.ndarray, bool] | None:
    """Each value as ``json.dumps(_json_value(v))`` would write it, or None for an unusual column.

    With ``True`` the values of a text column without gaps come without their quotes (the
    caller's template holds them: no new string per cell for them).
    """
    dtype = values.dtype
    if pd.api.types.is_bool_dtype(dtype) and not pd.api.types.is_object_dtype(dtype):
        return np.where(values.to_numpy(dtype=bool), "true", "false").astype(object), False
    if pd.api.types.is_integer_dtype(dtype) and not pd.api.types.is_extension_array_dtype(dtype):
        return np.array(list(map(str, values.to_numpy().tolist())), dtype=object), False
    if pd.api.types.is_float_dtype(dtype) and not pd.api.types.is_extension_array_dtype(dtype):
        numbers = values.to_numpy(dtype=float)
        text = _repr(numbers)
        text[~np.isfinite(numbers)] = "null"
        return text, False
    distinct = _text_codes(values)
    if distinct is None:
        return None
    strings, codes = distinct
    # Only quotes, backslashes and control characters need escaping (RFC 8259 §7): found in one
    # pass over the characters of the distinct values; those holding one go through json.dumps.
    escape = _Scan(strings).cells_with(lambda c: (c < 0x20) | (c == 0x22) | (c == 0x5C))
    escaped = [json.dumps(v, ensure_ascii=False) for v in strings[escape].tolist()] if escape.any() else []
    if (codes >= 0).all():
        if escaped:
            strings[escape] = [v[1:-1] for v in escaped]
        return strings[codes], True
    out = '"' + strings + '"'
    if escaped:
        out[escape] = escaped
    return np.append(out, "null")[codes], False  # code -1 (a gap) takes the last: null


_FEATURE = '{"type": "Feature", "properties": {'


def _geojson_chunks(
    points, lonlat: np.ndarray, *, rows: int = 8192, lonlat_text: tuple[np.ndarray, np.ndarray] | None = None
) -> Iterator[str]:
    """The text of :func:`_geojson_text_records` in pieces of ``rows`` features, built column by
    column (no dict per point); pieces keep the peak memory of a large plan near one chunk.

    ``lonlat_text``: the ``repr`` of ``lonlat``'s columns when already made (:func:`_lonlat_text`).
    """
    # A feature's text is constant text and column values in turn: [text, values, text, ...,
    # values, text]. Each feature's text ends with the opening of the next feature's.
    parts: list = []
    const = ""
    for column in (c for c in points.columns if c != "geometry"):
        made = _json_column(points[column])
        if made is None:
            yield _geojson_text_records(points, lonlat)
            return
        text, quoted = made
        const += (", " if parts or const else "") + json.dumps(str(column), ensure_ascii=False) + ": "
        parts += [const + ('"' if quoted else ""), text]
        const = '"' if quoted else ""
    lon, lat = lonlat_text if lonlat_text is not None else _repr_columns(lonlat)
    parts += [const + '}, "geometry": {"type": "Point", "coordinates": [', lon, ", ", lat, "]}}, " + _FEATURE]
    n = len(points)
    yield '{"type": "FeatureCollection", "features": [' + (_FEATURE if n else "")
    for start in range(0, n, rows):
        stop = min(n, start + rows)
        # A table of text pieces, a row per feature, joined in a single pass.
        pieces = np.empty((stop - start, len(parts)), dtype=object)
        for k, part in enumerate(parts):
            pieces[:, k] = part if isinstance(part, str) else part[start:stop]
        text = "".join(pieces.ravel().tolist())
        yield text[: -len(", " + _FEATURE)] if stop == n else text
    yield "]}\n"


def _geojson_text(points, lonlat: np.ndarray) -> str:
    """Same text as :func:`_geojson_text_records`, built column by column."""
    return "".join(_geojson_chunks(points, lonlat))


def write_points_geojson(plan, folder: Path) -> None:
    """``points.geojson``: a FeatureCollection in WGS84 with lon/lat order (RFC 7946 §3.1.1)."""
    points = plan.points
    chunks = _geojson_chunks(points, points_lonlat(points), lonlat_text=_lonlat_text(points))
    atomic_write_bytes(folder / "points.geojson", (c.encode("utf-8") for c in chunks))


def csv_xy_crs(plan) -> CRS:
    """The CRS of ``points.csv`` x/y: the input file's projected CRS when it had one, else the plan's.

    A farm's own GIS works in its projected CRS (a State Plane or national grid);
    x/y in that CRS drop straight onto its layers. A file in longitude/latitude gets
    the plan's local UTM metres.
    """
    source = plan.meta.get("input_crs")
    if source:
        try:
            crs = CRS.from_user_input(source)
        except Exception:  # a CRS this pyproj cannot build: fall back to the plan's own
            return plan.crs
        if crs.is_projected:
            return crs
    return plan.crs


@lru_cache(maxsize=8)
def _between(source, target) -> Transformer:
    return Transformer.from_crs(source, target, always_xy=True)


#: The columns points.csv adds after the base ones: coordinates and the CRS of x/y.
_CSV_COORDS = ("lon", "lat", "x", "y", "crs")
_CSV_BASE = ("point_id", "block", "stratum", "design")


def write_points_csv(plan, folder: Path) -> None:
    """``points.csv``: ids, lon/lat (WGS84) and x/y in the CRS named in ``crs`` (see :func:`csv_xy_crs`)."""
    pts = plan.points
    lonlat = points_lonlat(pts)
    xy_crs = csv_xy_crs(plan)
    xy = shapely.get_coordinates(pts.geometry.values) if len(pts) else np.empty((0, 2))
    if len(pts) and not xy_crs.equals(plan.crs):
        xy = np.column_stack(_between(plan.crs, xy_crs).transform(xy[:, 0], xy[:, 1]))
    xy = np.round(xy, 3)
    crs_text = xy_crs.to_string()
    rest = [c for c in pts.columns if c not in _CSV_BASE and c != "geometry"]
    text = None
    # The table is the base columns, lon, lat, x, y, crs, then the points' other columns; its
    # cells are made straight from the points' columns (no table built) unless a column of
    # the points takes a coordinate's name (the table would hold it in that place).
    if len(pts) and pts.columns.is_unique and not {str(c) for c in rest} & set(_CSV_COORDS):
        lon, lat = _lonlat_text(pts)
        columns = [_csv_cells(_table_column(pts[c])) for c in _CSV_BASE]
        columns += [_blank_nan(lon, lonlat[:, 0]), _blank_nan(lat, lonlat[:, 1])]
        crs_cell = _csv_text_cells(np.array([crs_text], dtype=object))[0]
        columns += [_csv_cells(xy[:, 0]), _csv_cells(xy[:, 1]), np.full(len(pts), crs_cell, dtype=object)]
        columns += [_csv_cells(_table_column(pts[c])) for c in rest]
        names = [*_CSV_BASE, *_CSV_COORDS, *map(str, rest)]
        if all(c is not None for c in columns):
            text = _csv_join(names, columns)
    if text is None:
        table = pd.DataFrame({c: pts[c].to_numpy() for c in _CSV_BASE})
        table["lon"] = lonlat[:, 0]
        table["lat"] = lonlat[:, 1]
        table["x"] = xy[:, 0]
        table["y"] = xy[:, 1]
        table["crs"] = crs_text
        for column in rest:
            table[column] = pts[column].to_numpy()
        text = _csv_text(table)
        if text is None:
            text = neutralise_frame(table).to_csv(index=False, lineterminator="\n")
    atomic_write_text(folder / "points.csv", text)


def _table_column(column: pd.Series) -> pd.Series:
    """``column`` as a table made of its ``to_numpy()`` holds it (types inferred anew).

    Numbers, booleans and strings keep their type that way, so they are used as they are.
    """
    dtype = column.dtype
    if dtype in (np.float64, np.int64, np.bool_) or isinstance(dtype, pd.StringDtype):
        return column
    return pd.Series(column.to_numpy())


def _blank_nan(text: np.ndarray, numbers: np.ndarray) -> np.ndarray:
    """``text`` (shared, left unchanged) with the cells of NaN ``numbers`` empty, as pandas writes them."""
    missing = np.isnan(numbers)
    if not missing.any():
        return text
    text = text.copy()
    text[missing] = ""
    return text


_CSV_QUOTE = re.compile(r'[,"\r\n]')
# Code points of the characters that make a cell formula-like at its start (see safe.py).
_FORMULA_CODES = np.array([ord(c) for c in _FORMULA_PREFIXES])


def _csv_text(table: pd.DataFrame) -> str | None:
    """The text ``neutralise_frame(table).to_csv(index=False, lineterminator="\\n")`` gives.

    Built column by column. None (use pandas) for an empty table, a column of
    another type, or a column name that would need quotes.
    """
    if len(table) == 0:
        return None
    columns = [_csv_cells(table.iloc[:, i]) for i in range(table.shape[1])]
    if any(c is None for c in columns):
        return None
    return _csv_join([str(c) for c in table.columns], columns)


def _csv_join(names: list[str], columns: list[np.ndarray]) -> str | None:
    """CSV text of the columns' finished cells (:func:`_csv_cells`); None when a name needs quotes."""
    if _CSV_QUOTE.search("".join(names)):
        return None
    pieces = np.empty((len(columns[0]), 2 * len(columns)), dtype=object)
    pieces[:, 1::2] = ","
    pieces[:, -1] = "\n"
    for k, cells in enumerate(columns):
        pieces[:, 2 * k] = cells
    return ",".join(names) + "\n" + "".join(pieces.ravel().tolist())


def _csv_text_cells(strings: np.ndarray) -> np.ndarray:
    """Text cells as pandas writes them after neutralise_frame (``strings`` changed in place)."""
    scan = _Scan(strings)
    # As neutralise_frame does to text cells (numbers stay as they are).
    formula = scan.first_in(_FORMULA_CODES)
    # Then quoted as the csv module's QUOTE_MINIMAL does (what pandas writes) with the "\n"
    # line terminator plan files use: a cell with a comma, quote or "\n" goes in quotes, its
    # quotes doubled (a lone "\r" is not quoted). The apostrophe added above changes neither.
    quote = scan.cells_with(lambda c: (c == 0x2C) | (c == 0x22) | (c == 0x0A))
    if formula.any():
        strings[formula] = "'" + strings[formula]
    if quote.any():
        doubled = scan.cells_with(lambda c: c == 0x22)
        if doubled.any():
            strings[doubled] = [v.replace('"', '""') for v in strings[doubled].tolist()]
        strings[quote] = '"' + strings[quote] + '"'
    return strings


class _Scan:
    """The characters of a column of strings as one array of code points, to test every cell
    for a set of characters in a few array operations instead of a Python call per cell."""

    def __init__(self, cells: np.ndarray) -> None:
        values = cells.tolist()
        joined = "".join(values)
        self.lengths = np.fromiter(map(len, values), dtype=np.int64, count=len(values))
        self.ends = np.cumsum(self.lengths)
        if joined.isascii():
            self.codes: np.ndarray = np.frombuffer(joined.encode("ascii"), dtype=np.uint8)
        else:
            # One code point per character, as str indexes them (lone surrogates included).
            self.codes = np.frombuffer(joined.encode("utf-32-le", "surrogatepass"), dtype=np.uint32)

    def cells_with(self, test) -> np.ndarray:
        """Per cell: whether any of its characters' code points passes ``test`` (array -> bool array)."""
        hits = np.flatnonzero(test(self.codes))
        out = np.zeros(len(self.lengths), dtype=bool)
        out[np.searchsorted(self.ends, hits, side="right")] = True
        return out

    def first_in(self, codes: np.ndarray) -> np.ndarray:
        """Per cell: whether its first character's code point is one of ``codes`` (empty cells: no)."""
        out = np.zeros(len(self.lengths), dtype=bool)
        filled = self.lengths > 0
        out[filled] = np.isin(self.codes[(self.ends - self.lengths)[filled]], codes)
        return out


def _text_codes(column: pd.Series) -> tuple[np.ndarray, np.ndarray] | None:
    """A text column's distinct strings and each cell's index into them (-1 where missing).

    Cells are checked, quoted and escaped once per distinct value (block names, strata and
    designs repeat on every point). None for a column that is not text.
    """
    dtype = column.dtype
    if not isinstance(dtype, pd.StringDtype):
        if not pd.api.types.is_object_dtype(dtype):
            return None
        if pd.api.types.infer_dtype(column, skipna=True) not in ("string", "empty"):
            return None
    sample = column.iloc[:_SAMPLE]
    if 2 * sample.nunique() <= len(sample):
        codes, uniques = pd.factorize(column, use_na_sentinel=True)
        return np.array(np.asarray(uniques, dtype=object), dtype=object, copy=True), np.asarray(codes)
    # Mostly distinct values (ids, instructions): each cell is its own value.
    missing = column.isna().to_numpy(dtype=bool)
    # A copy: the caller changes cells in place, and a string array may hand out its own storage.
    strings = np.array(column.to_numpy(dtype=object), dtype=object, copy=True)
    strings[missing] = ""
    codes = np.arange(len(strings))
    codes[missing] = -1
    return strings, codes


#: Cells looked at to tell a column of repeated values from one of mostly distinct ones.
_SAMPLE = 256


def _csv_cells(column: pd.Series | np.ndarray) -> np.ndarray | None:
    """A column's cells as ``DataFrame.to_csv`` writes them, or None for an unusual type.

    Floats: Python's shortest round-trip ``repr``, the text numpy gives and pandas
    writes. Missing values are empty cells. A float64 array is taken as a column.
    """
    dtype = column.dtype
    if dtype == np.float64:  # float32 text differs, extension floats hold pd.NA
        numbers = np.asarray(column)
        return _blank_nan(_repr(numbers), numbers)
    if dtype == np.int64:
        return np.array(list(map(str, column.to_numpy().tolist())), dtype=object)
    if dtype == np.bool_:
        return np.where(column.to_numpy(), "True", "False").astype(object)
    distinct = _text_codes(column)
    if distinct is None:
        return None
    strings, codes = distinct
    return np.append(_csv_text_cells(strings), "")[codes]  # code -1 (a gap) takes the last: empty


def write_summary_csv(plan, folder: Path) -> None:
    """``summary.csv``: per block area, sampled area, points, density and flags."""
    summary = plan.summary()
    text = _csv_text(summary)  # pandas' text, made column by column
    if text is None:
        text = neutralise_frame(summary).to_csv(index=False, lineterminator="\n")
    atomic_write_text(folder / "summary.csv", text)


def write_manifest(plan, folder: Path) -> None:
    """``manifest.json``: what is needed to reproduce and audit the plan."""
    manifest = {**plan.meta, "parameters": plan.params}
    if plan.points is not None:
        xy_crs = csv_xy_crs(plan)
        manifest["points_csv_crs"] = {"crs": xy_crs.to_string(), "name": xy_crs.name, "unit": _unit(xy_crs)}
    atomic_write_text(
        folder / "manifest.json", json.dumps(manifest, indent=2, sort_keys=True, default=str) + "\n"
    )


def _unit(crs: CRS) -> str:
    axes = crs.axis_info
    return axes[0].unit_name if axes else ""


def write_readme(plan, folder: Path) -> None:
    """``README.txt``: what each file is, how to reproduce, and the field cautions."""
    lines = [
        "fieldplan sampling plan",
        "",
        f"Blocks: {len(plan.blocks)}   Points: {len(plan.points)}   Design: {plan.params.get('design')}",
        f"Seed: {plan.params.get('seed')}   CRS used for distances: {plan.meta.get('crs_name')}",
        f"Reproduce with: {plan.meta.get('command')}",
        "",
        "Files: points.geojson / points.csv (sample points), summary.csv (per block),",
        "manifest.json (parameters, input checksum), plan.gpkg (everything, for later steps).",
        "",
        "Before going into the field:",
        cautions_text(plan_cautions(plan)),
        "",
    ]
    atomic_write_text(folder / "README.txt", "\n".join(lines))
