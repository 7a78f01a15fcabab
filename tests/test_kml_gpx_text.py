"""points.kml and points.gpx built as text from arrays: same bytes as the ElementTree writers,
valid XML whatever the names hold, and read back by independent parsers (stdlib, GDAL)."""

from __future__ import annotations

import dataclasses
import xml.etree.ElementTree as ET

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely
from pyproj import Transformer

from fieldplan.demo import demo_blocks_path
from fieldplan.plan import make_plan
from fieldplan.read import read_blocks
from fieldplan.write import gpx, kml
from fieldplan.write.gpx import fill_rows, text_column, xml_escape, xml_text
from tests import kml_gpx_reference as reference
from tests.geoms import E0, N0, blocks_frame, with_hole

KML = "{http://www.opengis.net/kml/2.2}"
GPX = "{http://www.topografix.com/GPX/1/1}"
# Names that would break out of an element, a CDATA section or a %-template if not escaped,
# control characters XML 1.0 forbids, a NUL and characters beyond the BMP. (A lone surrogate
# cannot be held in a pandas text column; the instructions below carry one in an object column.)
HOSTILE = [
    "A<b>&amp;\"'",
    "x]]>y",
    "<![CDATA[c]]>",
    "ctl\x01\x02\x0b\x1f\x7fend",
    "nul\x00sep",
    "grape \U0001f347 \U0001d518",
    "%s %d %(x)s %% 100%",
    "\r\nline\ttab",
    "</name></Placemark><Placemark><name>evil",
    "\ufffe\uffffnon-chars",
]


@pytest.fixture(scope="module")
def demo():
    return make_plan(read_blocks(demo_blocks_path()), spacing=40.0, seed=7, command=["test"])


@pytest.fixture(scope="module")
def hostile():
    geoms = {
        name: shapely.box(E0 + 400 * i, N0, E0 + 400 * i + 300, N0 + 200) for i, name in enumerate(HOSTILE)
    }
    blocks = blocks_frame(geoms, variety=[h[::-1] for h in HOSTILE])
    plan = make_plan(blocks, design="random", design_options={"per_block": 3}, spares=1, seed=5)
    points = plan.points.copy()
    n = len(points)
    texts = [*HOSTILE, "lone \ud800 half"]
    points["instructions"] = pd.Series(
        [texts[i % len(texts)] for i in range(n)], index=points.index, dtype=object
    )
    points["row"] = np.arange(n) * 7 - 3  # integers, some negative
    points["plant"] = np.where(np.arange(n) % 3 == 0, np.nan, np.arange(n) / 4.0)  # NaN, whole, fractions
    points["units"] = np.where(np.arange(n) % 5 == 0, np.inf, 1e20)
    exclusions = gpd.GeoDataFrame(
        {"name": ['pond <deep> & "cold"', "ctl\x01", None, "empty", "hole ]]>"]},
        geometry=[
            shapely.box(E0 + 10, N0 + 10, E0 + 50, N0 + 50),
            shapely.MultiPolygon([shapely.box(E0 + 410, N0 + 10, E0 + 450, N0 + 50), with_hole]),
            shapely.box(E0 + 810, N0 + 10, E0 + 850, N0 + 50),
            shapely.Polygon(),
            shapely.Polygon(with_hole.exterior, with_hole.interiors),
        ],
        crs=plan.crs,
    )
    return dataclasses.replace(plan, points=points, exclusions=exclusions)


@pytest.fixture(scope="module")
def odd_shapes(hostile):
    """Blocks of every shape the writer may meet: multi-part, one-part multi, holes, a
    collection with a line, empty and missing."""
    box = shapely.box(E0, N0, E0 + 100, N0 + 80)
    geoms = [
        shapely.MultiPolygon([box, shapely.box(E0 + 200, N0, E0 + 260, N0 + 50)]),
        shapely.MultiPolygon([with_hole]),
        with_hole,
        shapely.GeometryCollection([box, shapely.LineString([(E0, N0), (E0 + 5, N0 + 5)])]),
        shapely.GeometryCollection([shapely.LineString([(E0, N0), (E0 + 5, N0 + 5)]), shapely.Point(E0, N0)]),
        shapely.LineString([(E0, N0), (E0 + 5, N0 + 5)]),
        shapely.Polygon(),
        None,
    ]
    blocks = gpd.GeoDataFrame(
        {"block": [f"S{i}&" for i in range(len(geoms))], "variety": [None, 3.0, 2.5, "", "v", "w", "x", "y"]},
        geometry=geoms,
        crs=hostile.crs,
    )
    return dataclasses.replace(hostile, blocks=blocks)


def _routes(plan):
    xy = shapely.get_coordinates(plan.points.geometry.values)
    return gpd.GeoDataFrame(
        {"crew": ["north <&>", "\x01east\U0001f347", "empty"]},
        geometry=[shapely.linestrings(xy[:4]), shapely.linestrings(xy[4:9]), shapely.LineString()],
        crs=plan.crs,
    )


@pytest.mark.parametrize("name", ["demo", "hostile", "odd_shapes"])
def test_same_bytes_as_the_elementtree_writers(name, request, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1800000000")
    plan = request.getfixturevalue(name)
    # reference: the former writers (ElementTree skeleton, pandas text columns), frozen in
    # tests/kml_gpx_reference.py
    assert kml.kml_bytes(plan) == reference.kml_bytes(plan)
    assert gpx.gpx_bytes(plan) == reference.gpx_bytes(plan)
    routes = _routes(plan)
    assert gpx.gpx_bytes(plan, routes=routes) == reference.gpx_bytes(plan, routes=routes)


def _lonlat(plan, frame) -> np.ndarray:
    xy = shapely.get_coordinates(frame.geometry.values)
    # reference: pyproj.Transformer (PROJ) for the projected -> WGS84 step
    lon, lat = Transformer.from_crs(plan.crs, 4326, always_xy=True).transform(xy[:, 0], xy[:, 1])
    return np.column_stack([lon, lat])


def _parsed(text) -> str:
    """``text`` as a parser reports it: xml_text's cleaning, then line ends normalised
    (reference: W3C XML 1.0 section 2.11, CR LF and lone CR read as LF)."""
    return xml_text(text).replace("\r\n", "\n").replace("\r", "\n")


def test_hostile_kml_parses_back_with_the_standard_library(hostile):
    data = kml.kml_bytes(hostile)
    # reference: W3C XML 1.0 section 2.4, "]]>" must not appear literally in content
    body = data.split(b"?>", 1)[1]
    assert b"]]>" not in body and b"\x00" not in data and b"\x01" not in data
    root = ET.fromstring(data)  # reference: xml.etree.ElementTree (expat), a conforming parser
    folders = {f.findtext(f"{KML}name"): f for f in root.iter(f"{KML}Folder")}
    blocks = [m.findtext(f"{KML}name") for m in folders["Blocks"].findall(f"{KML}Placemark")]
    assert blocks == [_parsed(f"Block {b}") for b in hostile.blocks["block"]]
    # reference: W3C XML 1.0 section 2.2 Char production (no C0 controls but tab/LF/CR,
    # no surrogates, no U+FFFE/U+FFFF); DEL and characters beyond the BMP are allowed
    assert "Block grape \U0001f347 \U0001d518" in blocks and "Block ctl\x7fend" in blocks
    assert "Block non-chars" in blocks and "Block nulsep" in blocks
    descriptions = [m.findtext(f"{KML}description") or "" for m in root.iter(f"{KML}Placemark")]
    assert any(d.endswith("; lone  half") for d in descriptions)
    points = folders["Sample points"].findall(f"{KML}Placemark")
    spares = folders[kml.SPARES_FOLDER].findall(f"{KML}Placemark")
    assert len(points) + len(spares) == len(hostile.points)
    expected = dict(
        zip(hostile.points["point_id"].map(_parsed), _lonlat(hostile, hostile.points), strict=True)
    )
    for mark in points + spares:
        lon, lat = (float(v) for v in mark.findtext(f"{KML}Point/{KML}coordinates").split(","))
        ref_lon, ref_lat = expected[mark.findtext(f"{KML}name")]
        assert abs(lon - ref_lon) <= 1e-8 and abs(lat - ref_lat) <= 1e-8  # 8 decimals
    values = {d.findtext(f"{KML}value") for d in root.iter(f"{KML}Data") if d.get("name") == "block"}
    assert values == {_parsed(b) for b in hostile.blocks["block"]}
    excluded = [
        m.findtext(f"{KML}name") for m in folders["Exclusions (not sampled)"].findall(f"{KML}Placemark")
    ]
    assert excluded == ['Excluded: pond <deep> & "cold"', "Excluded: ctl", "Excluded: ", "Excluded: hole ]]>"]


def test_kml_and_gpx_read_by_gdal(hostile, tmp_path):
    kml.write_kml(hostile, tmp_path / "points.kml")
    gpx.write_gpx(hostile, tmp_path / "points.gpx", routes=_routes(hostile))
    # reference: GDAL's KML and GPX drivers (through pyogrio), an independent reader
    layers = [row[0] for row in pyogrio.list_layers(tmp_path / "points.kml")]
    assert layers == ["Blocks", "Exclusions (not sampled)", "Sample points", kml.SPARES_FOLDER]
    blocks = pyogrio.read_dataframe(tmp_path / "points.kml", layer="Blocks")
    assert blocks["Name"].tolist() == [_parsed(f"Block {b}") for b in hostile.blocks["block"]]
    wgs = hostile.blocks.to_crs(4326)
    for got, want in zip(blocks.geometry.values, wgs.geometry.values, strict=True):
        assert shapely.equals_exact(shapely.force_2d(got), want, tolerance=1e-8)
    marks = pd.concat(
        [pyogrio.read_dataframe(tmp_path / "points.kml", layer=name) for name in layers[2:]],
        ignore_index=True,
    )
    lonlat = dict(zip(hostile.points["point_id"].map(_parsed), _lonlat(hostile, hostile.points), strict=True))
    assert sorted(marks["Name"]) == sorted(lonlat)
    got = shapely.get_coordinates(marks.geometry.values)
    want = np.array([lonlat[name] for name in marks["Name"]])
    np.testing.assert_allclose(got, want, atol=1e-8, rtol=0)

    waypoints = pyogrio.read_dataframe(tmp_path / "points.gpx", layer="waypoints")
    assert waypoints["name"].tolist() == hostile.points["point_id"].map(_parsed).tolist()
    np.testing.assert_allclose(
        shapely.get_coordinates(waypoints.geometry.values),
        _lonlat(hostile, hostile.points),
        atol=1e-8,
        rtol=0,
    )
    strata = hostile.points["stratum"].map(_parsed).where(hostile.points["status"] != "spare", "spare")
    assert waypoints["type"].tolist() == strata.tolist()
    assert waypoints["desc"].str.contains("%s %d %(x)s %% 100%", regex=False).any()
    routes = pyogrio.read_dataframe(tmp_path / "points.gpx", layer="routes")
    assert routes["name"].tolist() == ["Crew north <&>", "Crew east\U0001f347"]
    route_points = pyogrio.read_dataframe(tmp_path / "points.gpx", layer="route_points")
    np.testing.assert_allclose(
        shapely.get_coordinates(route_points.geometry.values),
        _lonlat(hostile, hostile.points.iloc[:9]),
        atol=1e-8,
        rtol=0,
    )


def test_text_column_is_xml_text_per_cell():
    columns = [
        pd.Series([1, -2, 0, 10**15], dtype="int64"),
        pd.Series([0.5, -0.0, 3.0, np.nan, np.inf, -np.inf, 1e20, 1e-7, 2.5e16, -1.25]),
        pd.Series(["a", None, "b\x01", "ok"]),
        pd.Series(["a", None, "b\x01", "\ud800", "ok"], dtype=object),
        pd.Series(["a", "b", None], dtype="string"),
        pd.Series([True, False]),
        pd.Series([1, "x", 2.0, None, np.nan], dtype=object),
        pd.Series(pd.to_datetime(["2027-03-01"])),
    ]
    for column in columns:
        # reference: xml_text applied cell by cell (the definition the column helper speeds up)
        assert text_column(column).tolist() == [xml_text(v) for v in column.tolist()], column.dtype


def test_escaping_and_row_filling():
    texts = np.array(['a&b<c>"d"', "", "plain", "]]>"], dtype=object)
    # reference: W3C XML 1.0 section 2.4 (& and < escaped; > in "]]>"); quotes for attributes
    assert xml_escape(texts).tolist() == ["a&amp;b&lt;c&gt;&quot;d&quot;", "", "plain", "]]&gt;"]
    assert ET.fromstring(f'<x a="{xml_escape(texts)[0]}"/>').get("a") == texts[0]
    # reference: Python's format specifiers (f-strings), row by row
    rows = [("a%s", 1.5, "x"), ("b", -0.000000004, "y")]
    want = "".join(f"<{a}|{b:.8f}|{c}>" for a, b, c in rows)
    assert fill_rows("<%s|%.8f|%s>", *map(list, zip(*rows, strict=True))) == want
    many = np.arange(40000) / 3.0
    assert fill_rows("%.8f\n", many) == "".join(f"{v:.8f}\n" for v in many.tolist())
    assert fill_rows("%s") == ""
