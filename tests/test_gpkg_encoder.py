"""plan.gpkg written with SQLite directly: the same file for readers as GDAL's writer, and a sound GeoPackage.

The reference writer is GDAL's GPKG driver through pyogrio (``write_gpkg_with_gdal``,
the path plan.gpkg was written by before). The standard is OGC 12-128r18
(GeoPackage 1.2-1.4); requirement numbers below are from its text.
"""

from __future__ import annotations

import re
import sqlite3
import struct
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely

from fieldplan.plan import make_plan
from fieldplan.store import load_plan, write_plan
from fieldplan.write.geopackage import (
    APPLICATION_ID,
    USER_VERSION,
    GeoPackage,
    Unsupported,
    _as_text,
    _bulk_load_rtree,
)
from fieldplan.write.gpkg import write_gpkg, write_gpkg_with_gdal, write_layer
from tests.geoms import E0, N0, UTM33N, blocks_frame, concave, multipart, tiny, with_hole

STAMP = "2027-03-01T08:00:00.000Z"


def _blocks():
    return blocks_frame(
        {
            "A": concave,
            "B": shapely.affinity.translate(with_hole, 700),
            "C": shapely.affinity.translate(multipart, 0, 600),
            "D": shapely.affinity.translate(tiny, 1400),
        },
        row_bearing_deg=[10.0, 95.0, np.nan, 0.0],
        variety=["Syrah", None, "Merlot", "Syrah"],
        planted=np.array([2001, 2010, 1999, 2020], dtype="int32"),
    )


def _plan(**options):
    excl = gpd.GeoDataFrame(
        {"name": ["wet"]}, geometry=[shapely.Point(E0 + 250, N0 + 60).buffer(40)], crs=UTM33N
    )
    return make_plan(_blocks(), spacing=30, seed=5, exclusions=excl, command=["x"], **options)


def _rows(path: Path, sql: str) -> list:
    with sqlite3.connect(path) as con:
        return con.execute(sql).fetchall()


def assert_same_store(new: Path, old: Path) -> None:
    """Everything a reader sees of the two files is identical (pyogrio/GDAL and SQL views)."""
    # reference: GDAL's GPKG driver through pyogrio reads both files.
    layers = pyogrio.list_layers(old).tolist()
    assert pyogrio.list_layers(new).tolist() == layers
    for name, _ in layers:
        info_new, info_old = pyogrio.read_info(new, layer=name), pyogrio.read_info(old, layer=name)
        assert info_new.keys() == info_old.keys()
        for key in info_old:
            a, b = info_new[key], info_old[key]
            if isinstance(b, np.ndarray):
                assert a.tolist() == b.tolist(), (name, key)
            else:
                assert a == b, (name, key, a, b)
        frame_new = pyogrio.read_dataframe(new, layer=name, fid_as_index=True)
        frame_old = pyogrio.read_dataframe(old, layer=name, fid_as_index=True)
        pd.testing.assert_frame_equal(frame_new, frame_old, check_exact=True)
        # Byte for byte in SQL, geometry blobs included; declared column types too.
        assert _rows(new, f'SELECT * FROM "{name}" ORDER BY fid') == _rows(
            old, f'SELECT * FROM "{name}" ORDER BY fid'
        )
        assert _rows(new, f"PRAGMA table_info('{name}')") == _rows(old, f"PRAGMA table_info('{name}')")
    tables = "SELECT name FROM sqlite_master WHERE type = 'table' ORDER BY name"
    assert _rows(new, tables) == _rows(old, tables)
    has_extensions = ("gpkg_extensions",) in _rows(old, tables)
    for sql in (
        "SELECT * FROM gpkg_contents ORDER BY rowid",
        "SELECT * FROM gpkg_geometry_columns ORDER BY table_name",
        "SELECT * FROM gpkg_spatial_ref_sys ORDER BY srs_id",
        "SELECT * FROM gpkg_ogr_contents ORDER BY table_name",
        *(["SELECT * FROM gpkg_extensions ORDER BY table_name"] if has_extensions else []),
        "SELECT * FROM sqlite_sequence ORDER BY name",
        "SELECT type, name, tbl_name FROM sqlite_master ORDER BY name",
        "PRAGMA application_id",
        "PRAGMA user_version",
    ):
        assert _rows(new, sql) == _rows(old, sql), sql


def _both(plan, tmp_path):
    a, b = tmp_path / "new", tmp_path / "gdal"
    a.mkdir()
    b.mkdir()
    write_gpkg(plan, a)
    write_gpkg_with_gdal(plan, b)
    return a / "plan.gpkg", b / "plan.gpkg"


def test_plan_store_reads_the_same_as_the_gdal_written_one(tmp_path):
    plan = _plan(substitute="within-cell")
    assert "substitutes" in plan.layers
    new, old = _both(plan, tmp_path)
    assert_same_store(new, old)


def test_estate_plan_reads_the_same(tmp_path):
    from fieldplan.read import read_blocks

    demo = Path(__file__).parent.parent / "demo_plots" / "estate_blocks.geojson"
    plan = make_plan(read_blocks(demo), spacing=40, seed=1, command=["x"])
    new, old = _both(plan, tmp_path)
    assert_same_store(new, old)


def test_reloaded_plan_with_later_layers_reads_the_same(tmp_path):
    # A plan folder reloaded with its further layers (as a re-plan or rebuild sees it).
    out = write_plan(_plan(substitute="within-cell"), tmp_path / "plan")
    routes = gpd.GeoDataFrame(
        {"crew": ["A", "B"], "n_points": np.array([3, 4]), "length_km": [1.25, np.nan]},
        geometry=[
            shapely.LineString([(E0, N0), (E0 + 50, N0 + 20)]),
            shapely.LineString([(E0, N0), (E0, N0 + 9)]),
        ],
        crs=UTM33N,
    )
    write_layer(out / "plan.gpkg", "routes", routes)
    plan = load_plan(out, check=False)
    assert "routes" in plan.layers
    new, old = _both(plan, tmp_path)
    assert_same_store(new, old)


def _all_types(n: int = 5) -> dict:
    rng = np.random.default_rng(4)
    times = pd.to_datetime(
        ["2026-01-01 10:00:01.5", None, "2026-03-01 00:00", "1999-12-31 23:59:59.999", "2030-06-01"],
        format="ISO8601",
    )
    return {
        "i8": np.arange(n, dtype="int8") - 2,
        "u8": np.arange(n, dtype="uint8"),
        "i16": np.arange(n, dtype="int16") * 300,
        "u16": np.arange(n, dtype="uint16") * 1000,
        "i32": np.arange(n, dtype="int32") * 100_000,
        "u32": np.arange(n, dtype="uint32") * 4_000_000,
        "i64": np.arange(n, dtype="int64") * 2**40,
        "u64": np.arange(n, dtype="uint64"),
        "f32": np.array([1.5, np.nan, 3.25, -0.1, 1e30], dtype="float32"),
        "f64": np.array([1 / 3, np.nan, np.inf, -np.inf, -0.0]),
        "flag": np.array([True, False, True, True, False]),
        "text": pd.Series(["a", None, np.nan, "é ü 中", "it's"], dtype=object),
        "blank": pd.Series([None] * n, dtype=object),
        "str": pd.Series(["x", None, "z", "", "q"], dtype="str"),
        "string": pd.Series(["x", None, "z", "w", "q"], dtype="string"),
        "Int64": pd.array([1, None, 3, 4, 5], dtype="Int64"),
        "Int16": pd.array([1, None, 3, 4, 5], dtype="Int16"),
        "boolean": pd.array([True, None, False, True, True], dtype="boolean"),
        "Float64": pd.array([1.0, None, 3.5, 4.0, 5.0], dtype="Float64"),
        "when": times,
        "when_utc": times.tz_localize("UTC"),
        "noise": rng.normal(size=n),
    }


def _compare_layer(tmp_path, name, frame, geometry_type=None):
    # reference: pyogrio.write_dataframe into GDAL's GPKG driver, as write_layer does.
    new, old = tmp_path / f"{name}_new.gpkg", tmp_path / f"{name}_gdal.gpkg"
    store = GeoPackage(new, last_change=STAMP)
    if isinstance(frame, gpd.GeoDataFrame):
        store.add_features(name, frame, geometry_type=geometry_type)
    else:
        store.add_attributes(name, frame)
    store.close()
    from fieldplan.write.gpkg import _fixed_clock

    with _fixed_clock(STAMP):
        write_layer(old, name, frame, geometry_type=geometry_type)
    assert_same_store(new, old)


def test_every_column_type_is_typed_and_valued_as_gdal_does(tmp_path):
    columns = _all_types()
    geoms = [shapely.Point(E0 + k, N0 - k) for k in range(5)]
    _compare_layer(tmp_path, "typed", gpd.GeoDataFrame(columns, geometry=geoms, crs=UTM33N), "Point")
    _compare_layer(tmp_path, "table", pd.DataFrame(columns))
    _compare_layer(tmp_path, "empty_table", pd.DataFrame({"key": pd.Series([], dtype="str")}))


def test_values_bound_once_per_statement_or_as_null_markers_read_back_as_given(tmp_path):
    # Constant columns, all-null columns, nulls among values and the null marker itself as a
    # value, over more rows than one statement takes.
    from fieldplan.write.geopackage import _NULL

    n = 300
    text = [f"v{k}" for k in range(n)]
    text[7] = None
    marked = list(text)
    marked[9] = _NULL
    frame = pd.DataFrame(
        {
            "same_text": ["grid"] * n,
            "same_int": np.full(n, 7, dtype="int64"),
            "nothing": pd.Series([None] * n, dtype=object),
            "some_null": pd.Series(text, dtype=object),
            "with_marker": pd.Series(marked, dtype=object),
            "nan_only": np.full(n, np.nan),
        }
    )
    _compare_layer(tmp_path, "bindings", frame)
    back = pyogrio.read_dataframe(tmp_path / "bindings_new.gpkg", layer="bindings", read_geometry=False)
    assert back["with_marker"].iloc[9] == _NULL and pd.isna(back["with_marker"].iloc[7])
    assert (back["same_int"] == 7).all() and back["nothing"].isna().all()


@pytest.mark.parametrize(
    ("geoms", "geometry_type"),
    [
        # declared multi type: single parts promoted, empty and missing kept apart
        (
            [
                shapely.box(0, 0, 1, 2),
                shapely.Polygon(),
                None,
                shapely.MultiPolygon([shapely.box(0, 0, 1, 1)]),
            ],
            "MultiPolygon",
        ),
        # inferred types: one, a single/multi pair, mixed kinds
        ([shapely.box(0, 0, 1, 2), shapely.box(5, 5, 6, 9)], None),
        ([shapely.box(0, 0, 1, 2), shapely.MultiPolygon([shapely.box(5, 5, 6, 9)])], None),
        ([shapely.Point(1, 2), shapely.box(5, 5, 6, 9)], None),
        ([shapely.LineString([(0, 0), (3, 4)]), shapely.MultiLineString([[(0, 0), (1, 1)]])], None),
        ([shapely.Point(1, 2), shapely.Point(), None, shapely.MultiPoint([(0, 0), (2, 2)])], None),
        ([shapely.Point(1, 2), shapely.Point(), None], "Point"),
        ([], None),
        ([], "Point"),
    ],
)
def test_geometries_are_encoded_as_gdal_encodes_them(tmp_path, geoms, geometry_type):
    frame = gpd.GeoDataFrame(
        {"k": np.arange(len(geoms))},
        geometry=gpd.GeoSeries([None if g is None else shapely.affinity.translate(g, E0, N0) for g in geoms]),
        crs=UTM33N,
    )
    _compare_layer(tmp_path, "shapes", frame, geometry_type)


@pytest.mark.parametrize(
    "crs",
    [
        "EPSG:4326",  # the required WGS 84 row serves
        "EPSG:32734",  # a southern UTM zone
        "ESRI:102022",  # another authority: its code as srs_id
        "+proj=aeqd +lat_0=-33.9 +lon_0=18.8 +x_0=0 +y_0=0 +ellps=WGS84 +units=m",  # no authority: private id
    ],
)
def test_crs_rows_match_gdal(tmp_path, crs):
    frame = gpd.GeoDataFrame({"k": [1]}, geometry=[shapely.Point(10, 20)], crs=crs)
    _compare_layer(tmp_path, "place", frame, "Point")


def test_polar_crs_reads_as_the_same_crs(tmp_path):
    # reference: GDAL reads the CRS of both files. GDAL's own WKT 1 of EPSG:3031 adds two
    # AXIS nodes that PROJ's (pyproj's) leaves out; readers take the CRS from its EPSG code.
    frame = gpd.GeoDataFrame({"k": [1]}, geometry=[shapely.Point(10, 20)], crs="EPSG:3031")
    new, old = tmp_path / "new.gpkg", tmp_path / "old.gpkg"
    store = GeoPackage(new, last_change=STAMP)
    store.add_features("place", frame, geometry_type="Point")
    store.close()
    write_layer(old, "place", frame, geometry_type="Point")
    assert (
        pyogrio.read_info(new, layer="place")["crs"]
        == pyogrio.read_info(old, layer="place")["crs"]
        == "EPSG:3031"
    )
    back = pyogrio.read_dataframe(new, layer="place")
    assert back.crs.to_epsg() == 3031 and back.geometry.iloc[0].equals(frame.geometry.iloc[0])


def test_frames_the_encoder_cannot_match_fall_back_to_gdal(tmp_path):
    plan = _plan()
    odd = gpd.GeoDataFrame(
        {"kind": pd.Series(["a", "b"], dtype="category"), "note": pd.Series(["x", pd.NA], dtype=object)},
        geometry=[shapely.Point(E0, N0), shapely.Point(E0 + 1, N0)],
        crs=UTM33N,
    )
    plan.layers["odd"] = odd
    plan.layers["nul"] = pd.DataFrame({"note": ["a\x00b", "c"]})  # GDAL keeps text up to a NUL
    plan.layers["later"] = pd.DataFrame({"v": [1, 2]})
    with pytest.raises(Unsupported):
        GeoPackage(tmp_path / "t.gpkg", last_change=STAMP).add_features("odd", odd)
    # A layer refused after its CRS row went in leaves nothing behind once rolled back.
    store = GeoPackage(tmp_path / "z.gpkg", last_change=STAMP)
    store.con.execute("SAVEPOINT layer")
    with pytest.raises(Unsupported, match="Z"):
        store.add_features("z", gpd.GeoDataFrame(geometry=[shapely.Point(1, 2, 3)], crs="EPSG:3031"))
    store.con.execute("ROLLBACK TO layer")
    store.close()
    assert [r[0] for r in _rows(tmp_path / "z.gpkg", "SELECT srs_id FROM gpkg_spatial_ref_sys")] == [
        -1,
        0,
        4326,
    ]
    assert _rows(tmp_path / "z.gpkg", "PRAGMA integrity_check") == [("ok",)]
    new, old = _both(plan, tmp_path)
    assert_same_store(new, old)
    order = [row[0] for row in _rows(new, "SELECT table_name FROM gpkg_contents ORDER BY rowid")]
    assert order == ["blocks", "points", "exclusions", "plan_info", "odd", "nul", "later"]
    with pytest.raises(Unsupported, match="NUL"):
        GeoPackage(tmp_path / "n.gpkg", last_change=STAMP).add_attributes("nul", plan.layers["nul"])


def test_same_plan_gives_the_same_bytes_stamped_with_its_creation_time(tmp_path, monkeypatch):
    monkeypatch.delenv("SOURCE_DATE_EPOCH", raising=False)
    plan = _plan()
    a, b = tmp_path / "a", tmp_path / "b"
    a.mkdir()
    b.mkdir()
    write_gpkg(plan, a)
    write_gpkg(plan, b)
    assert (a / "plan.gpkg").read_bytes() == (b / "plan.gpkg").read_bytes()
    stamps = {row[0] for row in _rows(a / "plan.gpkg", "SELECT last_change FROM gpkg_contents")}
    assert stamps == {plan.meta["created_utc"].replace("Z", ".000Z")}
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1790000000")
    c = tmp_path / "c"
    c.mkdir()
    write_gpkg(plan, c)
    # reference: reproducible-builds.org SOURCE_DATE_EPOCH (seconds since 1970-01-01 UTC)
    assert {row[0] for row in _rows(c / "plan.gpkg", "SELECT last_change FROM gpkg_contents")} == {
        "2026-09-21T14:13:20.000Z"
    }


def _header(blob: bytes) -> tuple[int, int, int, int]:
    """(version, flags, srs_id, header length) of a GeoPackageBinary blob."""
    assert blob[:2] == b"GP"
    version, flags = blob[2], blob[3]
    srs_id = struct.unpack("<i" if flags & 1 else ">i", blob[4:8])[0]
    envelope_bytes = {0: 0, 1: 32, 2: 48, 3: 48, 4: 64}[(flags >> 1) & 7]
    return version, flags, srs_id, 8 + envelope_bytes


def test_the_file_meets_the_geopackage_requirements(tmp_path):
    # reference: OGC 12-128r18 (GeoPackage 1.4.0), requirement numbers as cited.
    out = write_plan(_plan(substitute="within-cell"), tmp_path / "plan", formats=["core"])
    path = out / "plan.gpkg"
    assert path.read_bytes()[:16] == b"SQLite format 3\x00"  # Req 1
    assert path.suffix == ".gpkg"  # Req 3
    con = sqlite3.connect(path)
    assert con.execute("PRAGMA application_id").fetchone()[0] == APPLICATION_ID == 0x47504B47  # Req 2
    assert con.execute("PRAGMA user_version").fetchone()[0] == USER_VERSION == 10400  # Req 2 (1.4.0)
    assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"  # Req 6
    assert con.execute("PRAGMA foreign_key_check").fetchall() == []  # Req 7
    srs_cols = [(r[1], r[2], r[3], r[5]) for r in con.execute("PRAGMA table_info(gpkg_spatial_ref_sys)")]
    assert srs_cols == [  # Req 10: name, type, not null, primary key
        ("srs_name", "TEXT", 1, 0),
        ("srs_id", "INTEGER", 1, 1),
        ("organization", "TEXT", 1, 0),
        ("organization_coordsys_id", "INTEGER", 1, 0),
        ("definition", "TEXT", 1, 0),
        ("description", "TEXT", 0, 0),
    ]
    srs = {
        r[0]: r[1:]
        for r in con.execute(
            "SELECT srs_id, organization, organization_coordsys_id, definition FROM gpkg_spatial_ref_sys"
        )
    }
    assert srs[-1] == ("NONE", -1, "undefined") and srs[0] == ("NONE", 0, "undefined")  # Req 11
    assert srs[4326][:2] == ("EPSG", 4326)  # Req 11
    assert srs[32633][:2] == ("EPSG", 32633) and srs[32633][2].startswith('PROJCS["WGS 84 / UTM zone 33N"')
    contents_cols = [r[1] for r in con.execute("PRAGMA table_info(gpkg_contents)")]
    assert contents_cols == [  # Req 13
        "table_name", "data_type", "identifier", "description", "last_change",
        "min_x", "min_y", "max_x", "max_y", "srs_id",
    ]  # fmt: skip
    contents = {
        r[0]: r[1:]
        for r in con.execute("SELECT table_name, data_type, last_change, srs_id FROM gpkg_contents")
    }
    tables = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
    assert set(contents) <= tables  # Req 14
    for _, stamp, srs_id in contents.values():
        assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z", stamp)  # Req 15
        assert srs_id in srs  # Req 16
    kinds = {name: row[0] for name, row in contents.items()}
    assert kinds == {
        "blocks": "features", "points": "features", "exclusions": "features", "substitutes": "features",
        "plan_info": "attributes",
    }  # Req 18 and the attributes clause  # fmt: skip
    geometry_columns = con.execute("SELECT * FROM gpkg_geometry_columns").fetchall()
    assert {r[0] for r in geometry_columns} == {k for k, v in kinds.items() if v == "features"}  # Req 22, 23
    for table, column, type_name, srs_id, z, m in geometry_columns:
        info = {r[1]: r for r in con.execute(f"PRAGMA table_info('{table}')")}
        assert info[column][2] == type_name  # Req 24, 31
        assert type_name in {
            "GEOMETRY",
            "POINT",
            "LINESTRING",
            "POLYGON",
            "MULTIPOINT",
            "MULTILINESTRING",
            "MULTIPOLYGON",
        }  # Req 25
        assert srs_id in srs and z in (0, 1, 2) and m in (0, 1, 2)  # Req 26-28
        assert info["fid"][2] == "INTEGER" and info["fid"][5] == 1  # Req 29: integer primary key
        assert (
            "AUTOINCREMENT"
            in con.execute("SELECT sql FROM sqlite_master WHERE name = ?", (table,)).fetchone()[0]
        )
        assert sum(1 for r in info.values() if r[2] == type_name) == 1  # Req 30
        bounds = con.execute(
            "SELECT min_x, min_y, max_x, max_y FROM gpkg_contents WHERE table_name = ?", (table,)
        ).fetchone()
        for (blob,) in con.execute(f'SELECT "{column}" FROM "{table}"'):
            if blob is None:
                continue
            version, flags, blob_srs, size = _header(blob)  # Req 19
            assert version == 0 and flags & 0b1110_0000 == 0  # version 1 of the format; X bit 0
            assert blob_srs == srs_id  # Req 33
            geom = shapely.from_wkb(blob[size:])
            assert geom.geom_type.upper() == type_name or type_name == "GEOMETRY"  # Req 20, 32
            if geom.is_empty:
                assert flags & 0x10 and size == 8  # Req 149
            else:
                x0, y0, x1, y1 = geom.bounds
                assert bounds[0] <= x0 and bounds[1] <= y0 and x1 <= bounds[2] and y1 <= bounds[3]  # Req 148
                if size == 40:
                    assert struct.unpack("<4d", blob[8:40]) == (x0, x1, y0, y1)
        # Annex F.3 (gpkg_rtree_index): extension row, virtual table, the 1.4 triggers, in step.
        assert con.execute(
            "SELECT extension_name, scope FROM gpkg_extensions WHERE table_name = ? AND column_name = ?",
            (table, column),
        ).fetchone() == ("gpkg_rtree_index", "write-only")
        triggers = {
            r[0]
            for r in con.execute(
                "SELECT name FROM sqlite_master WHERE type = 'trigger' AND tbl_name = ?", (table,)
            )
        }
        suffixes = ("insert", "update2", "update4", "update5", "update6", "update7", "delete")
        assert {f"rtree_{table}_{column}_{s}" for s in suffixes} <= triggers
        assert con.execute(f"SELECT rtreecheck('rtree_{table}_{column}')").fetchone()[0] == "ok"
        indexed = con.execute(f"SELECT count(*) FROM rtree_{table}_{column}").fetchone()[0]
        assert (
            indexed
            == con.execute(f'SELECT count(*) FROM "{table}" WHERE "{column}" IS NOT NULL').fetchone()[0]
        )
    con.close()


def test_gdal_reads_and_extends_the_file_keeping_the_index_in_step(tmp_path):
    # reference: GDAL (pyogrio) appending rows and layers, the rtree triggers of Annex F.3 run by it.
    out = write_plan(_plan(), tmp_path / "plan", formats=["core"])
    path = out / "plan.gpkg"
    before = pyogrio.read_info(path, layer="points")["features"]
    extra = gpd.GeoDataFrame(
        {"point_id": ["X1"], "block": ["A"]}, geometry=[shapely.Point(E0 + 2000, N0 + 2000)], crs=UTM33N
    )
    pyogrio.write_dataframe(extra, path, layer="points", driver="GPKG", append=True)
    write_layer(path, "notes", pd.DataFrame({"note": ["checked"]}))
    assert pyogrio.read_info(path, layer="points")["features"] == before + 1
    assert [r[0] for r in pyogrio.list_layers(path)][-1] == "notes"
    with sqlite3.connect(path) as con:
        assert con.execute("SELECT rtreecheck('rtree_points_geom')").fetchone()[0] == "ok"
        hit = con.execute(
            "SELECT id FROM rtree_points_geom WHERE minx >= ? AND maxy <= ?", (E0 + 1999, N0 + 2001)
        ).fetchall()
        assert hit == [(before + 1,)]
    far = pyogrio.read_dataframe(path, layer="points", bbox=(E0 + 1990, N0 + 1990, E0 + 2010, N0 + 2010))
    assert far["point_id"].tolist() == ["X1"]
    plan = load_plan(out, check=False)
    assert len(plan.points) == before + 1


def test_bulk_loaded_rtree_answers_as_one_filled_by_inserts():
    # reference: SQLite's rtree module (its own insert path, and rtreecheck()).
    rng = np.random.default_rng(11)
    for n in (1, 50, 51, 52, 3000, 9000):
        x, y = rng.uniform(-1e6, 1e6, n), rng.uniform(-5e6, 5e6, n)
        w, h = rng.exponential(50, n), rng.exponential(50, n)
        boxes = np.column_stack([x, x + w, y, y + h])
        ids = rng.permutation(np.arange(1, 3 * n + 1))[:n]
        con = sqlite3.connect(":memory:")
        con.execute("CREATE VIRTUAL TABLE bulk USING rtree(id, minx, maxx, miny, maxy)")
        con.execute("CREATE VIRTUAL TABLE plain USING rtree(id, minx, maxx, miny, maxy)")
        _bulk_load_rtree(con, "bulk", ids, boxes)
        con.executemany(
            "INSERT INTO plain VALUES (?, ?, ?, ?, ?)", zip(ids.tolist(), *boxes.T.tolist(), strict=True)
        )
        assert con.execute("SELECT rtreecheck('bulk')").fetchone()[0] == "ok"
        assert (
            con.execute("SELECT * FROM bulk ORDER BY id").fetchall()
            == con.execute("SELECT * FROM plain ORDER BY id").fetchall()
        )
        for _ in range(20):
            qx, qy = rng.uniform(-1e6, 1e6), rng.uniform(-5e6, 5e6)
            q = (qx, qx + 2e5, qy, qy + 1e6)
            sql = "SELECT id FROM {} WHERE maxx >= ? AND minx <= ? AND maxy >= ? AND miny <= ? ORDER BY id"
            args = (q[0], q[1], q[2], q[3])
            assert (
                con.execute(sql.format("bulk"), args).fetchall()
                == con.execute(sql.format("plain"), args).fetchall()
            )
        # The tree stays usable for the module's own edits.
        con.execute("DELETE FROM bulk WHERE id = ?", (int(ids[0]),))
        con.execute("INSERT INTO bulk VALUES (?, 0, 1, 0, 1)", (10 * n,))
        assert con.execute("SELECT rtreecheck('bulk')").fetchone()[0] == "ok"


def test_extent_text_rounding_matches_sqlite_printf():
    # reference: SQLite's printf('%.17g') as run by GDAL's own SQLite (through pyogrio's SQL).
    values = [399481.52935814095, 5367541.4268880915, 305365.84511724993, 1 / 3, -2.5e-7, 123456789.125]
    sql = "SELECT " + ", ".join(f"CAST(printf('%.17g', {v!r}) AS REAL) AS c{k}" for k, v in enumerate(values))
    demo = Path(__file__).parent.parent / "demo_plots" / "estate_blocks.geojson"
    through_gdal = pyogrio.read_dataframe(demo, sql=sql, sql_dialect="SQLITE").iloc[0].tolist()
    assert [_as_text(v) for v in values] == through_gdal
