"""Plain GeoJSON block files read without GDAL give GDAL's frame; anything else still goes to GDAL.

The reference is GDAL's GeoJSON driver through pyogrio (``geopandas.read_file``), which reads
every other file: same columns, types, values, geometries (to the bit) and CRS.
"""

from __future__ import annotations

import json
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

from fieldplan import read
from fieldplan.read import _read_plain_geojson, read_blocks

DEMO = Path(__file__).resolve().parents[1] / "demo_plots" / "estate_blocks.geojson"


def _gdal(path: Path) -> gpd.GeoDataFrame:
    # reference: GDAL's GeoJSON driver (pyogrio), the reader of every other block file
    return gpd.read_file(path, engine="pyogrio", use_arrow=read._HAS_ARROW)


def _same(plain: gpd.GeoDataFrame, gdal: gpd.GeoDataFrame) -> None:
    assert list(plain.columns) == list(gdal.columns)
    assert plain.crs == gdal.crs
    pd.testing.assert_frame_equal(
        pd.DataFrame(plain.drop(columns="geometry")),
        pd.DataFrame(gdal.drop(columns="geometry")),
        check_exact=True,
    )
    assert dict(plain.dtypes.astype(str)) == dict(gdal.dtypes.astype(str))
    assert shapely.to_wkb(plain.geometry.values).tolist() == shapely.to_wkb(gdal.geometry.values).tolist()


def _write(path: Path, features: list, **extra) -> Path:
    path.write_text(
        json.dumps({"type": "FeatureCollection", **extra, "features": features}), encoding="utf-8"
    )
    return path


def _square(x: float, y: float, size: float = 0.001) -> dict:
    ring = [[x, y], [x + size, y], [x + size, y + size], [x, y + size], [x, y]]
    return {"type": "Polygon", "coordinates": [ring]}


def _features(props: list[dict], geoms: list | None = None) -> list:
    geoms = geoms or [_square(18.85 + i * 0.002, -33.9 + 1e-9 * i) for i in range(len(props))]
    return [{"type": "Feature", "properties": p, "geometry": g} for p, g in zip(props, geoms, strict=True)]


def test_demo_file_reads_as_gdal_reads_it():
    plain = _read_plain_geojson(DEMO.read_bytes())
    assert plain is not None
    _same(plain, _gdal(DEMO))


def test_attribute_types_as_gdal_types_them(tmp_path):
    rng = np.random.default_rng(4)
    n = 40
    props = [
        {
            "block": f"B{i}",
            "note": None if i % 7 == 0 else ["", "a, b", 'q "x"', "é ü", "=1+1", "line\nbreak", "1 2"][i % 7],
            "rows": int(rng.integers(1, 500)),
            "big": int(rng.integers(0, 2**40)) * (-1) ** i,
            "spacing": None if i % 5 == 0 else float(np.round(rng.random() * 3, 2)),
            "mixed": i if i % 2 else i + 0.5,
            "whole_reals": float(i),
            "late_real": i + 0.25 if i == n - 1 else i,
            "id": f"x{i}",
            " Row Spacing ": 2.5,
            "Sorte.ä": "Weißburgunder" if i % 2 else "Grüner Veltliner",
        }
        for i in range(n)
    ]
    crs84 = {"type": "name", "properties": {"name": "urn:ogc:def:crs:OGC:1.3:CRS84"}}
    path = _write(tmp_path / "b.geojson", _features(props), name="blocks", crs=crs84)
    plain = _read_plain_geojson(path.read_bytes())
    assert plain is not None
    _same(plain, _gdal(path))
    assert str(plain["rows"].dtype) == "int32" and str(plain["big"].dtype) == "int64"


def test_features_with_missing_properties(tmp_path):
    props = [
        {"block": "A", "variety": "Syrah", "row_spacing_m": 2.5, "extra": "late"},
        {"block": "B", "variety": "Merlot"},
        {"block": "C", "row_spacing_m": 3.0},
        {"block": "D", "variety": None, "row_spacing_m": 2.0, "extra": None},
    ]
    path = _write(tmp_path / "m.geojson", _features(props))
    plain = _read_plain_geojson(path.read_bytes())
    assert plain is not None
    _same(plain, _gdal(path))


def test_multipolygons_and_holes_bit_for_bit(tmp_path):
    rng = np.random.default_rng(9)
    geoms = []
    for i in range(30):
        x, y = 18.8 + rng.random() * 0.1, -33.9 + rng.random() * 0.1
        outer = [[x, y], [x + 0.003, y], [x + 0.003, y + 0.002], [x, y + 0.002], [x, y]]
        hole = [
            [x + 0.001, y + 0.0005],
            [x + 0.001, y + 0.001],
            [x + 0.0012, y + 0.001],
            [x + 0.001, y + 0.0005],
        ]
        if i % 3 == 0:
            geoms.append(
                {"type": "MultiPolygon", "coordinates": [[outer], [[[c[0] + 0.01, c[1]] for c in outer]]]}
            )
        else:
            geoms.append({"type": "Polygon", "coordinates": [outer, hole] if i % 2 else [outer]})
    # 17 significant digits: the parse must give the same doubles as GDAL's
    text = json.dumps(
        {"type": "FeatureCollection", "features": _features([{"block": f"P{i}"} for i in range(30)], geoms)}
    )
    path = tmp_path / "m.geojson"
    path.write_text(text)
    plain = _read_plain_geojson(path.read_bytes())
    assert plain is not None
    _same(plain, _gdal(path))


@pytest.mark.parametrize(
    "case",
    [
        "crs", "feature_id", "bool", "int_gaps", "date", "time", "list", "object", "only_nulls", "text_and_number",
        "point", "z", "null_geometry", "case_twins", "nan", "geometry_key", "not_utf8", "keys_added", "keys_order",
        "open_ring", "short_ring", "empty_polygon", "huge", "z_later",
    ],
)  # fmt: skip
def test_other_files_go_to_gdal(tmp_path, case):
    props = [{"block": "A", "v": 1}, {"block": "B", "v": 2}]
    extra: dict = {}
    if case == "crs":
        extra = {"crs": {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::4326"}}}
    change = {
        "bool": [{"block": "A", "v": True}, {"block": "B", "v": False}],
        "int_gaps": [{"block": "A", "v": 1}, {"block": "B", "v": None}],
        "date": [{"block": "A", "v": "2026-03-01"}, {"block": "B", "v": "x"}],
        "time": [{"block": "A", "v": "07:30"}, {"block": "B", "v": "x"}],
        "list": [{"block": "A", "v": [1]}, {"block": "B", "v": [2]}],
        "object": [{"block": "A", "v": {"a": 1}}, {"block": "B", "v": {"a": 2}}],
        "only_nulls": [{"block": "A", "v": None}, {"block": "B", "v": None}],
        "text_and_number": [{"block": "A", "v": 1}, {"block": "B", "v": "2"}],
        "geometry_key": [{"block": "A", "Geometry": 1}, {"block": "B", "Geometry": 2}],
        "keys_added": [{"block": "A", "v": 1}, {"block": "B", "w": 2}],
        "keys_order": [{"block": "A", "v": 1}, {"v": 2, "block": "B"}],
    }
    props = change.get(case, props)
    features = _features(props)
    if case == "feature_id":
        features[0]["id"] = 7
    if case == "point":
        features[1]["geometry"] = {"type": "Point", "coordinates": [18.85, -33.9]}
    if case == "z":
        features[0]["geometry"]["coordinates"][0] = [
            [*c, 120.0] for c in features[0]["geometry"]["coordinates"][0]
        ]
    if case == "null_geometry":
        features[1]["geometry"] = None
    ring = features[1]["geometry"]["coordinates"][0] if features[1]["geometry"] else None
    if case == "open_ring":
        del ring[-1]
    if case == "short_ring":
        features[1]["geometry"]["coordinates"][0] = [ring[0], ring[1], ring[0]]
    if case == "empty_polygon":
        features[1]["geometry"]["coordinates"] = []
    if case == "z_later":
        ring[2] = [*ring[2], 5.0]
    text = json.dumps({"type": "FeatureCollection", **extra, "features": features})
    if case == "case_twins":
        text = text.replace('"v": 1', '"v": 1, "V": 3').replace('"v": 2', '"v": 2, "V": 4')
    if case == "nan":
        text = text.replace('"v": 1', '"v": NaN')
    if case == "huge":
        text = text.replace("18.85,", "1e400,", 1)
    raw = text.encode("latin-1" if case == "not_utf8" else "utf-8")
    if case == "not_utf8":
        raw = raw.replace(b'"A"', '"\xe9"'.encode("latin-1"))
    assert _read_plain_geojson(raw) is None


def test_estate_with_holes_and_multipolygons_as_gdal_exports_it(tmp_path):
    from benchmarks.workloads import estate, write_geojson

    # Written by GDAL itself (crs member CRS84, layer name), as a GIS would export it.
    path = write_geojson(estate(200, seed=3), tmp_path / "estate.geojson")
    plain = _read_plain_geojson(path.read_bytes())
    assert plain is not None
    assert (
        shapely.get_num_interior_rings(plain.geometry.values[shapely.get_type_id(plain.geometry.values) == 3])
        > 0
    ).any()
    assert (shapely.get_type_id(plain.geometry.values) == 6).any()
    _same(plain, _gdal(path))


def test_read_blocks_is_the_same_either_way(tmp_path, monkeypatch):
    from benchmarks.workloads import estate, write_geojson
    from tests.real_exports import phone_geojson

    files = [DEMO, phone_geojson(tmp_path), write_geojson(estate(60, seed=8), tmp_path / "estate.geojson")]
    hostile = _features(
        [
            {
                "block": name,
                "variety": "Syrah, old",
                "row_spacing_m": 2.5,
                "plant_spacing_m": 1.2,
                "row_bearing_deg": 15.0,
            }
            for name in ("Blk 10", "=cmd", 'q "x"', "Blk 2", "é")
        ]
    )
    files.append(_write(tmp_path / "hostile.geojson", hostile))
    for path in files:
        fast = read_blocks(path)
        monkeypatch.setattr(read, "_PLAIN_GEOJSON_BYTES", 0)
        slow = read_blocks(path)
        monkeypatch.undo()
        pd.testing.assert_frame_equal(fast, slow, check_exact=True)
        assert fast.crs == slow.crs
        assert fast.attrs == slow.attrs


def test_a_layer_asked_for_by_name_is_left_to_gdal(tmp_path):
    from fieldplan.errors import InputError

    path = _write(tmp_path / "b.geojson", _features([{"block": "A"}, {"block": "B"}]))
    assert _read_plain_geojson(path.read_bytes()) is not None
    # reference: GDAL names a GeoJSON file's one layer after the file
    assert len(read.read_frame(path, layer="b")) == 2
    with pytest.raises(InputError, match="cannot read"):
        read.read_frame(path, layer="fields")
