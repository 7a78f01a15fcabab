"""plan_history reads plan.gpkg's table of contents: the layers GDAL lists, an unreadable store kept."""

from __future__ import annotations

import sqlite3

import geopandas as gpd
import pyogrio
import shapely

from fieldplan.store import HISTORY_LAYERS, plan_history


def _gpkg(folder, layers):
    folder.mkdir()
    for name in layers:
        frame = gpd.GeoDataFrame({"v": [1]}, geometry=[shapely.Point(0, 0)], crs="EPSG:4326")
        pyogrio.write_dataframe(frame, folder / "plan.gpkg", layer=name)
    return folder / "plan.gpkg"


def test_history_layers_as_pyogrio_lists_them(tmp_path):
    folder = tmp_path / "p #?%20 é"  # a name a file: URI must escape
    gpkg = _gpkg(folder, ["blocks", "points", "results", "events"])
    # reference: pyogrio.list_layers (GDAL's GeoPackage driver)
    listed = {row[0] for row in pyogrio.list_layers(gpkg)}
    assert plan_history(folder) == [f"{n} layer" for n in HISTORY_LAYERS if n in listed]
    assert plan_history(folder) == ["results layer", "events layer"]


def test_plan_without_history_and_unreadable_store(tmp_path):
    _gpkg(tmp_path / "p", ["blocks", "points"])
    assert plan_history(tmp_path / "p") == []
    (tmp_path / "q").mkdir()
    (tmp_path / "q" / "plan.gpkg").write_bytes(b"not a database at all" * 100)
    assert plan_history(tmp_path / "q") == ["plan.gpkg"]
    # An SQLite file that is no GeoPackage (no gpkg_contents) is kept as history too.
    with sqlite3.connect(tmp_path / "r.gpkg") as db:
        db.execute("CREATE TABLE t (x)")
    (tmp_path / "r").mkdir()
    (tmp_path / "r.gpkg").rename(tmp_path / "r" / "plan.gpkg")
    assert plan_history(tmp_path / "r") == ["plan.gpkg"]
