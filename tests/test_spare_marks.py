"""Unused spares are marked as such in points.gpx and points.kml."""

from __future__ import annotations

import xml.etree.ElementTree as ET

import gpxpy
import pytest
import shapely

from fieldplan.plan import make_plan
from fieldplan.write.gpx import gpx_bytes
from fieldplan.write.kml import SPARES_FOLDER, kml_bytes
from tests.geoms import E0, N0, blocks_frame

KML = "{http://www.opengis.net/kml/2.2}"


@pytest.fixture(scope="module")
def plan():
    blocks = blocks_frame(
        {"A": shapely.box(E0, N0, E0 + 300, N0 + 200), "B": shapely.box(E0 + 400, N0, E0 + 600, N0 + 200)}
    )
    return make_plan(blocks, design="random", design_options={"per_block": 4}, spares=2, seed=5)


def test_gpx_spares_have_type_spare_and_say_so(plan):
    # reference: gpxpy (PyPI) GPX parser; GPX 1.1 schema wptType/type ("type (classification)")
    gpx = gpxpy.parse(gpx_bytes(plan).decode("utf-8"))
    pts = plan.points.set_index("point_id")
    assert [w.name for w in gpx.waypoints] == plan.points["point_id"].tolist()
    spares = [w for w in gpx.waypoints if w.type == "spare"]
    assert sorted(w.name for w in spares) == sorted(pts.index[pts["status"] == "spare"])
    assert len(spares) == 4
    for w in spares:
        rank = int(pts.loc[w.name, "spare_rank"])
        assert w.description.startswith(f"SPARE #{rank} \u2014 use only when told")
    planned = [w for w in gpx.waypoints if w.type != "spare"]
    assert len(planned) == 8
    assert all("SPARE" not in (w.description or "") for w in planned)
    assert {w.type for w in planned} == set(pts.loc[pts["status"] == "selected", "stratum"])


def test_kml_spares_in_their_own_folder_with_their_own_style(plan):
    # reference: OGC KML 2.2 (OGC 07-147r2): Folder, Placemark, Style/@id, styleUrl; parsed with xml.etree
    root = ET.fromstring(kml_bytes(plan))
    doc = root.find(f"{KML}Document")
    folders = {f.findtext(f"{KML}name"): f for f in doc.findall(f"{KML}Folder")}
    assert SPARES_FOLDER == "Spares (use only when a point is inaccessible)"
    spare_marks = folders[SPARES_FOLDER].findall(f"{KML}Placemark")
    planned_marks = folders["Sample points"].findall(f"{KML}Placemark")
    status = dict(zip(plan.points["point_id"], plan.points["status"], strict=True))
    assert {m.findtext(f"{KML}name") for m in spare_marks} == {k for k, v in status.items() if v == "spare"}
    assert {m.findtext(f"{KML}name") for m in planned_marks} == {
        k for k, v in status.items() if v == "selected"
    }
    spare_styles = {m.findtext(f"{KML}styleUrl") for m in spare_marks}
    planned_styles = {m.findtext(f"{KML}styleUrl") for m in planned_marks}
    assert len(spare_styles) == 1 and not spare_styles & planned_styles
    style_ids = {s.get("id") for s in doc.findall(f"{KML}Style")}
    assert spare_styles.pop().lstrip("#") in style_ids
    assert all(m.findtext(f"{KML}description").startswith("SPARE #") for m in spare_marks)


def test_plan_without_spares_has_no_spares_folder():
    # reference: OGC KML 2.2 Folder element; GPX 1.1 type element (no spare, no mark)
    blocks = blocks_frame({"A": shapely.box(E0, N0, E0 + 300, N0 + 200)})
    plain = make_plan(blocks, spacing=60.0, seed=1)
    root = ET.fromstring(kml_bytes(plain))
    names = [f.findtext(f"{KML}name") for f in root.iter(f"{KML}Folder")]
    assert SPARES_FOLDER not in names and "Sample points" in names
    gpx = gpxpy.parse(gpx_bytes(plain).decode("utf-8"))
    assert gpx.waypoints and all(w.type != "spare" for w in gpx.waypoints)
