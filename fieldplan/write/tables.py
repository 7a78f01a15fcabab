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


# [points frame, its geometry array, lon/lat or None] while :func:`shared_lonlat` is active.
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
    entry = [points, points.geometry.values, None]
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


_NEEDS_ESCAPE = re.compile(r'["\\\x00-\x1f]')


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


def _json_column(values: pd.Series) -> np.ndarray | None:
    """Each value as ``json.dumps(_json_value(v))`` would write it, or None for an unusual column."""
    dtype = values.dtype
    if pd.api.types.is_bool_dtype(dtype) and not pd.api.types.is_object_dtype(dtype):
        return np.where(values.to_numpy(dtype=bool), "true", "false").astype(object)
    if pd.api.types.is_integer_dtype(dtype) and not pd.api.types.is_extension_array_dtype(dtype):
        return np.array(list(map(str, values.to_numpy().tolist())), dtype=object)
    if pd.api.types.is_float_dtype(dtype) and not pd.api.types.is_extension_array_dtype(dtype):
        numbers = values.to_numpy(dtype=float)
        text = np.array(list(map(repr, numbers.tolist())), dtype=object)
        text[~np.isfinite(numbers)] = "null"
        return text
    if pd.api.types.infer_dtype(values, skipna=True) not in ("string", "empty"):
        return None
    text = values.astype(object).to_numpy()
    missing = pd.isna(text)
    strings = np.where(missing, "", text)
    # Only quotes, backslashes and control characters need escaping (RFC 8259 §7); one
    # search over the whole column finds out whether any value needs it.
    if _NEEDS_ESCAPE.search("".join(strings.tolist())) is None:
        out = '"' + strings + '"'
    else:
        out = np.array([json.dumps(v, ensure_ascii=False) for v in strings.tolist()], dtype=object)
    out[missing] = "null"
    return out


def _geojson_chunks(points, lonlat: np.ndarray, *, rows: int = 8192) -> Iterator[str]:
    """The text of :func:`_geojson_text_records` in pieces of ``rows`` features, built column by
    column (no dict per point); pieces keep the peak memory of a large plan near one chunk."""
    columns = [c for c in points.columns if c != "geometry"]
    parts: list[np.ndarray | str] = ['{"type": "Feature", "properties": {']
    for k, column in enumerate(columns):
        text = _json_column(points[column])
        if text is None:
            yield _geojson_text_records(points, lonlat)
            return
        key = json.dumps(str(column), ensure_ascii=False)
        parts += [(", " if k else "") + key + ": ", text]
    lon = np.array(list(map(repr, lonlat[:, 0].tolist())), dtype=object)
    lat = np.array(list(map(repr, lonlat[:, 1].tolist())), dtype=object)
    parts += ['}, "geometry": {"type": "Point", "coordinates": [', lon, ", ", lat, "]}}"]
    parts.append(", ")
    n = len(points)
    yield '{"type": "FeatureCollection", "features": ['
    for start in range(0, n, rows):
        stop = min(n, start + rows)
        # A table of text pieces, a row per feature, joined in a single pass.
        pieces = np.empty((stop - start, len(parts)), dtype=object)
        for k, part in enumerate(parts):
            pieces[:, k] = part if isinstance(part, str) else part[start:stop]
        text = "".join(pieces.ravel().tolist())
        yield text[:-2] if stop == n else text
    yield "]}\n"


def _geojson_text(points, lonlat: np.ndarray) -> str:
    """Same text as :func:`_geojson_text_records`, built column by column."""
    return "".join(_geojson_chunks(points, lonlat))


def write_points_geojson(plan, folder: Path) -> None:
    """``points.geojson``: a FeatureCollection in WGS84 with lon/lat order (RFC 7946 §3.1.1)."""
    lonlat = points_lonlat(plan.points)
    atomic_write_bytes(folder / "points.geojson", (c.encode("utf-8") for c in _geojson_chunks(plan.points, lonlat)))


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


def write_points_csv(plan, folder: Path) -> None:
    """``points.csv``: ids, lon/lat (WGS84) and x/y in the CRS named in ``crs`` (see :func:`csv_xy_crs`)."""
    pts = plan.points
    lonlat = points_lonlat(pts)
    xy_crs = csv_xy_crs(plan)
    xy = shapely.get_coordinates(pts.geometry.values) if len(pts) else np.empty((0, 2))
    if len(pts) and not xy_crs.equals(plan.crs):
        xy = np.column_stack(_between(plan.crs, xy_crs).transform(xy[:, 0], xy[:, 1]))
    xy = np.round(xy, 3)
    base = ["point_id", "block", "stratum", "design"]
    table = pd.DataFrame({c: pts[c].to_numpy() for c in base})
    table["lon"] = lonlat[:, 0]
    table["lat"] = lonlat[:, 1]
    table["x"] = xy[:, 0]
    table["y"] = xy[:, 1]
    table["crs"] = xy_crs.to_string()
    for column in pts.columns:
        if column not in base and column != "geometry":
            table[column] = pts[column].to_numpy()
    text = _csv_text(table)
    if text is None:
        text = neutralise_frame(table).to_csv(index=False, lineterminator="\n")
    atomic_write_text(folder / "points.csv", text)


_CSV_QUOTE = re.compile(r'[,"\r\n]')
# What the csv module quotes with the "\n" line terminator plan files use (a lone "\r" is not).
_CELL_QUOTE = re.compile(r'[,"\n]')
_FORMULA_START = re.compile("^[" + re.escape("".join(_FORMULA_PREFIXES)) + "]", re.MULTILINE)


def _csv_text(table: pd.DataFrame) -> str | None:
    """The text ``neutralise_frame(table).to_csv(index=False, lineterminator="\\n")`` gives.

    Built column by column. None (use pandas) for an empty table, a column of
    another type, or a column name that would need quotes.
    """
    if len(table) == 0:
        return None
    columns = [_csv_cells(table.iloc[:, i]) for i in range(table.shape[1])]
    names = [str(c) for c in table.columns]
    if any(c is None for c in columns):
        return None
    text = [c for c, dtype in zip(columns, table.dtypes, strict=True) if not _is_number(dtype)]
    if _CSV_QUOTE.search("".join(names)):
        return None
    for cells in text:
        # As neutralise_frame does to text cells (numbers stay as they are). One search over
        # the column finds out whether any cell may need it (a line start inside a cell is a
        # false alarm the per-cell check then clears).
        if _FORMULA_START.search("\n".join(cells.tolist())):
            hit = pd.Series(cells, dtype=object).str.startswith(_FORMULA_PREFIXES).to_numpy(dtype=bool)
            cells[hit] = "'" + cells[hit]
        # Then quoted as the csv module's QUOTE_MINIMAL does (what pandas writes): a cell with a
        # comma, quote or line break goes in quotes, its quotes doubled.
        if _CELL_QUOTE.search("".join(cells.tolist())):
            quote = pd.Series(cells, dtype=object).str.contains(_CELL_QUOTE).to_numpy(dtype=bool)
            cells[quote] = ['"' + v.replace('"', '""') + '"' for v in cells[quote].tolist()]
    pieces = np.empty((len(table), 2 * len(columns)), dtype=object)
    pieces[:, 1::2] = ","
    pieces[:, -1] = "\n"
    for k, cells in enumerate(columns):
        pieces[:, 2 * k] = cells
    return ",".join(names) + "\n" + "".join(pieces.ravel().tolist())


def _is_number(dtype) -> bool:
    # Cells of these types are digits, signs, dots, "e", "inf", "nan", "True"/"False": never quoted.
    return dtype == np.float64 or dtype == np.int64 or dtype == np.bool_


def _csv_cells(column: pd.Series) -> np.ndarray | None:
    """A column's cells as ``DataFrame.to_csv`` writes them, or None for an unusual type.

    Floats: Python's shortest round-trip ``repr``, the text numpy gives and pandas
    writes. Missing values are empty cells.
    """
    dtype = column.dtype
    if dtype == np.float64:  # float32 text differs, extension floats hold pd.NA
        numbers = column.to_numpy()
        text = np.array(list(map(repr, numbers.tolist())), dtype=object)
        text[np.isnan(numbers)] = ""
        return text
    if dtype == np.int64:
        return np.array(list(map(str, column.to_numpy().tolist())), dtype=object)
    if dtype == np.bool_:
        return np.where(column.to_numpy(), "True", "False").astype(object)
    if isinstance(dtype, pd.StringDtype):
        return column.to_numpy(dtype=object, na_value="")
    if not pd.api.types.is_object_dtype(dtype):
        return None
    if pd.api.types.infer_dtype(column, skipna=True) not in ("string", "empty"):
        return None
    values = column.to_numpy(dtype=object)
    return np.where(pd.isna(values), "", values).astype(object)


def write_summary_csv(plan, folder: Path) -> None:
    """``summary.csv``: per block area, sampled area, points, density and flags."""
    text = neutralise_frame(plan.summary()).to_csv(index=False, lineterminator="\n")
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
