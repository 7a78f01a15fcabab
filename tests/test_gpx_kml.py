"""points.gpx (GPX 1.1) and points.kml (OGC KML 2.2)."""

from __future__ import annotations

import json
import re
import xml.etree.ElementTree as ET

import geopandas as gpd
import gpxpy
import numpy as np
import pytest
import shapely
from pyproj import Transformer

from fieldplan.plan import make_plan
from fieldplan.read import read_blocks
from fieldplan.write.gpx import gpx_bytes, write_gpx, xml_text
from fieldplan.write.kml import kml_bytes, kml_colour, write_kml
from fieldplan.write.tables import write_points_geojson
from tests.geoms import lonlat_estate_file

KML = "{http://www.opengis.net/kml/2.2}"
EVIL = "<b>&amp;\"'</b>]]>"


@pytest.fixture(scope="module")
def plan(tmp_path_factory):
    folder = tmp_path_factory.mktemp("estate")
    names = [("A1", "Syrah"), (EVIL, "Chenin\x01blanc")]
    path = lonlat_estate_file(folder / "blocks.geojson", names, lon0=-121.5, lat0=38.5)
    blocks = read_blocks(path)
    out = make_plan(blocks, spacing=35.0, seed=11, command=["test"])
    out.points["instructions"] = np.where(
        np.arange(len(out.points)) % 2 == 0, "Composite of 10 cores, 0-20 cm", "=HYPERLINK(x)"
    )
    return out


@pytest.fixture(scope="module")
def geojson_lonlat(plan, tmp_path_factory):
    folder = tmp_path_factory.mktemp("out")
    write_points_geojson(plan, folder)
    data = json.loads((folder / "points.geojson").read_text())
    return {f["properties"]["point_id"]: f["geometry"]["coordinates"] for f in data["features"]}


def test_gpx_parses_with_gpxpy_and_matches_points_geojson(plan, geojson_lonlat, tmp_path):
    path = write_gpx(plan, tmp_path / "points.gpx")
    # reference: gpxpy (PyPI) GPX 1.0/1.1 parser
    gpx = gpxpy.parse(path.read_text(encoding="utf-8"))
    assert gpx.version == "1.1"
    assert len(gpx.waypoints) == len(plan.points)
    assert [w.name for w in gpx.waypoints] == plan.points["point_id"].tolist()
    for wpt in gpx.waypoints:
        lon, lat = geojson_lonlat[wpt.name]
        assert abs(wpt.longitude - lon) <= 1e-7 and abs(wpt.latitude - lat) <= 1e-7
    xy = shapely.get_coordinates(plan.points.geometry.values)
    # reference: pyproj.Transformer (PROJ) for the projected -> WGS84 step
    lon, lat = Transformer.from_crs(plan.crs, 4326, always_xy=True).transform(xy[:, 0], xy[:, 1])
    np.testing.assert_allclose([w.longitude for w in gpx.waypoints], lon, atol=1e-7)
    np.testing.assert_allclose([w.latitude for w in gpx.waypoints], lat, atol=1e-7)


def test_gpx_text_namespace_and_precision(plan):
    data = gpx_bytes(plan)
    root = ET.fromstring(data)
    # reference: GPX 1.1 schema, targetNamespace http://www.topografix.com/GPX/1/1
    assert root.tag == "{http://www.topografix.com/GPX/1/1}gpx"
    assert root.get("version") == "1.1"
    # At least 7 decimals: 1e-7 degree is about 1 cm (common practice, no source).
    for value in re.findall(rb'l(?:at|on)="(-?\d+\.\d+)"', data):
        assert len(value.split(b".")[1]) >= 7
    gpx = gpxpy.parse(data.decode("utf-8"))
    evil = [w for w in gpx.waypoints if w.name.startswith(EVIL)]
    assert evil and all(f"Block {EVIL}" in w.description for w in evil)
    assert "Composite of 10 cores" in gpx.waypoints[0].description
    assert {w.type for w in gpx.waypoints} == set(plan.points["stratum"])


def test_gpx_routes_become_rte(plan):
    line = shapely.linestrings(shapely.get_coordinates(plan.points.geometry.values[:4]))
    routes = gpd.GeoDataFrame({"crew": ["north"]}, geometry=[line], crs=plan.crs)
    gpx = gpxpy.parse(gpx_bytes(plan, routes=routes).decode("utf-8"))
    assert len(gpx.routes) == 1 and gpx.routes[0].name == "Crew north"
    assert [(p.latitude, p.longitude) for p in gpx.routes[0].points] == [
        (w.latitude, w.longitude) for w in gpx.waypoints[:4]
    ]


def test_kml_placemarks_match_points_geojson(plan, geojson_lonlat, tmp_path):
    path = write_kml(plan, tmp_path / "points.kml")
    root = ET.parse(path).getroot()
    # reference: OGC 07-147r2 KML 2.2, namespace http://www.opengis.net/kml/2.2;
    # kml:coordinates is "lon,lat[,alt]" tuples (section 16.10).
    assert root.tag == f"{KML}kml"
    marks = [m for m in root.iter(f"{KML}Placemark") if m.find(f"{KML}Point") is not None]
    assert len(marks) == len(plan.points)
    for mark in marks:
        name = mark.findtext(f"{KML}name")
        text = mark.find(f"{KML}Point/{KML}coordinates").text
        lon, lat = (float(v) for v in text.split(","))
        ref_lon, ref_lat = geojson_lonlat[name]
        assert abs(lon - ref_lon) <= 1e-7 and abs(lat - ref_lat) <= 1e-7
        assert len(text.split(",")[0].split(".")[1]) >= 7
        data = {d.get("name"): d.findtext(f"{KML}value") for d in mark.iter(f"{KML}Data")}
        assert data["block"] == name.rsplit("-", 1)[0]


def test_kml_blocks_are_polygons_with_escaped_names(plan):
    root = ET.fromstring(kml_bytes(plan))
    polys = [m for m in root.iter(f"{KML}Placemark") if m.find(f"{KML}Polygon") is not None]
    assert {m.findtext(f"{KML}name") for m in polys} == {"Block A1", f"Block {EVIL}"}
    descriptions = {m.findtext(f"{KML}description") for m in polys}
    # reference: W3C XML 1.0 (5th ed.) section 2.2, production [2] Char excludes U+0001
    assert "Variety Chenin\x01blanc" not in descriptions and "Variety Cheninblanc" in descriptions
    a1 = next(m for m in polys if m.findtext(f"{KML}name") == "Block A1")
    ring = a1.find(f".//{KML}outerBoundaryIs/{KML}LinearRing/{KML}coordinates").text.split()
    assert ring[0] == ring[-1]  # reference: KML 2.2 section 10.9, LinearRing is closed
    # Block corner in the file vs pyproj's transform of the block's first vertex.
    block = plan.blocks.set_index("block").geometry["A1"]
    x, y = shapely.get_coordinates(block.exterior)[0]
    lon, lat = Transformer.from_crs(plan.crs, 4326, always_xy=True).transform(x, y)
    first = [float(v) for v in ring[0].split(",")]
    assert abs(first[0] - lon) <= 1e-7 and abs(first[1] - lat) <= 1e-7


def test_kml_colour_order_is_aabbggrr():
    # reference: OGC 07-147r2 KML 2.2, kml:colorType "aabbggrr"
    assert kml_colour("#E69F00") == "ff009fe6"
    assert kml_colour("#0072B2", alpha=0x80) == "80b27200"


def test_xml_text_drops_forbidden_characters_and_files_are_deterministic(plan):
    # reference: W3C XML 1.0 section 2.2 Char production
    assert xml_text("a\x00b\x1fc\ud800d\ufffee\tf") == "abcde\tf"
    assert xml_text(float("nan")) == "" and xml_text(3.0) == "3"
    assert gpx_bytes(plan) == gpx_bytes(plan)
    assert kml_bytes(plan) == kml_bytes(plan)  # common practice, no source: reproducible bytes
