"""``fieldplan plan --formats``: write a chosen subset of the plan folder's files."""

from __future__ import annotations

import json

from typer.testing import CliRunner

from fieldplan.cli.main import app
from fieldplan.demo import demo_blocks_path
from fieldplan.store import load_plan

runner = CliRunner()


def _plan(out, *args):
    return runner.invoke(
        app,
        ["plan", str(demo_blocks_path()), "--spacing", "60", "--seed", "4", "-q", "--out", str(out), *args],
    )


def test_core_formats_skip_page_map_and_gps_files(tmp_path):
    full, core = tmp_path / "full", tmp_path / "core"
    assert _plan(full).exit_code == 0
    result = _plan(core, "--formats", "core")
    assert result.exit_code == 0, result.output
    names = {p.name for p in core.iterdir()}
    assert names == {
        "points.geojson",
        "points.csv",
        "summary.csv",
        "manifest.json",
        "plan.gpkg",
        "README.txt",
    }
    assert {"plan.png", "map.html", "points.kml", "points.gpx"} <= {p.name for p in full.iterdir()}
    # The files that are written do not depend on the choice.
    for name in ("points.geojson", "points.csv", "summary.csv"):
        assert (core / name).read_bytes() == (full / name).read_bytes()
    manifest = json.loads((core / "manifest.json").read_text())
    assert manifest["formats"] == sorted(["csv", "geojson", "gpkg", "manifest", "readme", "summary"])
    assert "formats" not in json.loads((full / "manifest.json").read_text())
    # reference: the plan folder reloads from plan.gpkg (always written)
    assert len(load_plan(core).points) == sum(1 for _ in (core / "points.csv").open()) - 1


def test_single_formats_and_unknown_format(tmp_path):
    out = tmp_path / "gpx"
    assert _plan(out, "--formats", "gpx,csv").exit_code == 0
    names = {p.name for p in out.iterdir()}
    assert names == {"points.gpx", "points.csv", "manifest.json", "plan.gpkg", "README.txt"}
    bad = _plan(tmp_path / "bad", "--formats", "csv,xls")
    assert bad.exit_code == 2
    assert "xls" in bad.output and not (tmp_path / "bad").exists()


def test_new_plan_gpkg_is_a_sound_sqlite_database_and_settings_are_restored(tmp_path):
    # reference: SQLite's PRAGMA integrity_check and the GeoPackage 1.3 required tables
    # (gpkg_spatial_ref_sys, gpkg_contents, gpkg_geometry_columns; OGC 12-128r18 §1.1).
    import sqlite3

    import pyogrio

    out = tmp_path / "plan"
    assert _plan(out, "--formats", "core").exit_code == 0
    with sqlite3.connect(out / "plan.gpkg") as db:
        assert db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        tables = {row[0] for row in db.execute("SELECT name FROM sqlite_master WHERE type='table'")}
        contents = {row[0] for row in db.execute("SELECT table_name FROM gpkg_contents")}
    assert {"gpkg_spatial_ref_sys", "gpkg_contents", "gpkg_geometry_columns"} <= tables
    assert {"blocks", "points", "exclusions", "plan_info"} <= contents
    # The no-sync mode is for the new file only: later layer writes get SQLite's defaults.
    assert pyogrio.get_gdal_config_option("OGR_SQLITE_SYNCHRONOUS") is None
    assert pyogrio.get_gdal_config_option("OGR_SQLITE_JOURNAL") is None


def test_blocks_layer_stores_multipolygons_and_missing_numbers_as_null(tmp_path):
    # reference: GeoPackage 1.3 (OGC 12-128r18) §2.1.6: a layer's geometries are of the type
    # declared in gpkg_geometry_columns; SQLite stores no NaN, a missing number is NULL.
    import sqlite3

    import pyogrio

    out = tmp_path / "plan"
    assert _plan(out, "--formats", "core").exit_code == 0
    stored = pyogrio.read_dataframe(out / "plan.gpkg", layer="blocks")
    assert set(stored.geometry.geom_type) == {"MultiPolygon"}
    with sqlite3.connect(out / "plan.gpkg") as db:
        declared = db.execute(
            "SELECT geometry_type_name FROM gpkg_geometry_columns WHERE table_name = 'blocks'"
        ).fetchone()[0]
        kinds = {row[0] for row in db.execute("SELECT typeof(area_ha) FROM blocks")}
    assert declared == "MULTIPOLYGON"
    assert kinds == {"real"}
    # The plan reloads with one-part blocks as Polygons again.
    assert set(load_plan(out).blocks.geometry.geom_type) <= {"Polygon", "MultiPolygon"}
