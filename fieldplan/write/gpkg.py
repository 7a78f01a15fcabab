"""plan.gpkg: the plan's embedded store (OGC GeoPackage) that later stages read and extend.

Layers ``blocks``, ``points`` and ``exclusions`` in the plan's metric CRS, a
``plan_info`` table of key/value rows holding the manifest, and any further
layers a later stage adds (``routes``, ``cores``, ``results``...).
"""

from __future__ import annotations

import gc
import importlib.util
import json
import os
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path

import geopandas as gpd
import pandas as pd

__all__ = ["GPKG_NAME", "write_gpkg", "write_layer", "read_info", "info_table"]

GPKG_NAME = "plan.gpkg"


@contextmanager
def _fixed_clock(stamp: str | None = None):
    # GDAL stamps gpkg_contents.last_change; pinning it keeps reruns comparable.
    import pyogrio

    previous = pyogrio.get_gdal_config_option("OGR_CURRENT_DATE")
    if stamp is None:
        epoch = os.environ.get("SOURCE_DATE_EPOCH")
        if not epoch or previous:  # unpinned, or pinned by an enclosing writer already
            yield
            return
        stamp = datetime.fromtimestamp(int(epoch), UTC).strftime("%Y-%m-%dT%H:%M:%S.000Z")
    pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": stamp})
    try:
        yield
    finally:
        pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": previous})


def info_table(plan) -> pd.DataFrame:
    """The manifest as ``key, value`` rows (values JSON-encoded)."""
    items = {**plan.meta, "parameters": plan.params}
    return pd.DataFrame(
        {"key": list(items), "value": [json.dumps(v, sort_keys=True, default=str) for v in items.values()]}
    )


def write_layer(
    path: Path, name: str, frame, *, geometry_type: str | None = None, fast: bool = False
) -> None:
    """Write one layer (spatial or plain table) into a GeoPackage, replacing it if present.

    ``fast`` uses the Arrow writer when it gives the same layer (see :func:`_arrow_ok`).
    """
    import pyogrio

    with _fixed_clock():
        if isinstance(frame, gpd.GeoDataFrame):
            frame = _flat(frame)
            kwargs = {"geometry_type": geometry_type} if geometry_type else {}
            if len(frame) == 0 and not geometry_type:
                kwargs["geometry_type"] = "Unknown"
            if fast and _arrow_ok(frame, geometry_type):
                kwargs["use_arrow"] = True
            pyogrio.write_dataframe(frame, path, layer=name, driver="GPKG", **kwargs)
        else:
            pyogrio.write_dataframe(pd.DataFrame(frame), path, layer=name, driver="GPKG")


def _flat(frame: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    """Drop Z: layers are declared 2D, and GDAL warns on (and readers trip over) 3D shapes in them.

    Blocks are flattened on read already; this covers layers other stages add (positions
    from a GPS track with heights, say).
    """
    import numpy as np
    import shapely

    geoms = np.asarray(frame.geometry.values)
    if not len(geoms) or not shapely.has_z(geoms).any():
        return frame
    out = frame.copy()
    out[frame.geometry.name] = gpd.GeoSeries(shapely.force_2d(geoms), crs=frame.crs, index=frame.index)
    return out


def _arrow_ok(frame: gpd.GeoDataFrame, geometry_type: str | None) -> bool:
    """Whether the Arrow writer gives the same layer as the feature-by-feature one.

    It is about twice as fast, but writes geometries as they are (a layer declared
    MultiPolygon holding Polygons needs the other writer, which promotes them) and
    turns NaN into null, so only plain text, integer and boolean columns qualify.
    """
    if geometry_type is None or len(frame) == 0 or importlib.util.find_spec("pyarrow") is None:
        return False
    for column in frame.columns:
        if column == frame.geometry.name:
            continue
        dtype = frame[column].dtype
        if not (pd.api.types.is_string_dtype(dtype) and not pd.api.types.is_object_dtype(dtype)) and not (
            (pd.api.types.is_integer_dtype(dtype) or pd.api.types.is_bool_dtype(dtype))
            and not pd.api.types.is_extension_array_dtype(dtype)
        ):
            return False
    return bool((frame.geometry.geom_type == geometry_type).all())


@contextmanager
def _new_file_mode(path: Path, *, new: bool = True):
    """SQLite without per-transaction syncs or an on-disk journal, for a file being created.

    A new plan.gpkg is written into a staging folder that replaces the plan only
    once every file is complete, so SQLite's crash protection buys nothing here;
    one fsync at the end makes the finished file durable instead of one per
    transaction. Layers added later to an existing plan keep SQLite's defaults.
    """
    import pyogrio

    if new and path.exists():
        raise FileExistsError(f"{path} exists; the fast mode is for a new file only")
    options = {"OGR_SQLITE_SYNCHRONOUS": "OFF", "OGR_SQLITE_JOURNAL": "MEMORY"}
    pyogrio.set_gdal_config_options(options)
    try:
        yield
    finally:
        pyogrio.set_gdal_config_options({key: None for key in options})
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def gpkg_layers(plan) -> list[tuple[str, object, str | None]]:
    """The layers of a new plan.gpkg in order: (name, frame, declared geometry type)."""
    return [
        ("blocks", plan.blocks, "MultiPolygon"),
        ("points", plan.points, "Point"),
        ("exclusions", plan.exclusions, "MultiPolygon"),
        ("plan_info", info_table(plan), None),
        *((name, frame, None) for name, frame in plan.layers.items()),
    ]


def last_change(plan) -> str:
    """``gpkg_contents.last_change`` of a new plan.gpkg (OGC 12-128r18 Req 15 format).

    ``SOURCE_DATE_EPOCH`` when set, else the plan's creation time, so the same
    plan writes the same file.
    """
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if epoch:
        moment = datetime.fromtimestamp(int(epoch), UTC)
    else:
        created = (getattr(plan, "meta", None) or {}).get("created_utc")
        try:
            moment = datetime.fromisoformat(str(created).replace("Z", "+00:00")).astimezone(UTC)
        except ValueError:
            moment = datetime.now(UTC)
    return moment.strftime("%Y-%m-%dT%H:%M:%S.") + f"{moment.microsecond // 1000:03d}Z"


def write_gpkg(plan, folder: Path) -> None:
    """Write a new ``plan.gpkg`` with the plan's layers and ``plan_info``.

    The layers are encoded directly with SQLite (:mod:`fieldplan.write.geopackage`)
    as GDAL would write them; from the first layer holding a column or geometry
    that encoder does not write exactly alike, the rest go through GDAL
    (:func:`write_layer`), so readers see the same file either way.
    """
    path = Path(folder) / GPKG_NAME
    stamp = last_change(plan)
    layers = gpkg_layers(plan)
    # The cyclic collector paused: the writer makes some 100,000 short-lived values and
    # containers, none of them cyclic, and full collections would walk the whole heap.
    collecting = gc.isenabled()
    gc.disable()
    try:
        rest = _write_layers(path, layers, stamp)
    finally:
        if collecting:
            gc.enable()
    if rest:
        with _new_file_mode(path, new=False), _fixed_clock(stamp):
            for name, frame, geometry_type in rest:
                write_layer(path, name, frame, geometry_type=geometry_type, fast=name == "points")


def _write_layers(path: Path, layers: list, stamp: str) -> list:
    """Encode ``layers`` into a new GeoPackage at ``path``; return those left for GDAL."""
    from fieldplan.write.geopackage import GeoPackage, Unsupported

    store = GeoPackage(path, last_change=stamp)
    rest: list = []
    try:
        for k, (name, frame, geometry_type) in enumerate(layers):
            store.con.execute("SAVEPOINT layer")
            try:
                if isinstance(frame, gpd.GeoDataFrame):
                    store.add_features(name, _flat(frame), geometry_type=geometry_type)
                else:
                    store.add_attributes(name, pd.DataFrame(frame))
            except Unsupported:
                store.con.execute("ROLLBACK TO layer")
                rest = layers[k:]
                break
            store.con.execute("RELEASE layer")
    except BaseException:
        store.close(commit=False)
        path.unlink(missing_ok=True)
        raise
    store.close()
    return rest


def write_gpkg_with_gdal(plan, folder: Path) -> None:
    """Write a new ``plan.gpkg`` layer by layer through GDAL (the reference :func:`write_gpkg` matches)."""
    path = Path(folder) / GPKG_NAME
    with _new_file_mode(path), _fixed_clock(last_change(plan)):
        for name, frame, geometry_type in gpkg_layers(plan):
            write_layer(path, name, frame, geometry_type=geometry_type, fast=name == "points")


def read_info(path: Path) -> dict:
    """Read ``plan_info`` back into a dict."""
    import pyogrio

    table = pyogrio.read_dataframe(path, layer="plan_info", read_geometry=False)
    return {k: json.loads(v) for k, v in zip(table["key"], table["value"], strict=True)}
