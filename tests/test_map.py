"""map.html: self-contained, offline, escaped, deterministic."""

from __future__ import annotations

import base64
import hashlib
import html
import json
import re
from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
import shapely
from pyproj import Transformer

from fieldplan.plan import make_plan
from fieldplan.read import read_blocks
from fieldplan.safety import CAUTIONS, plan_cautions
from fieldplan.write.html_map import (
    PALETTE,
    SHAPES,
    map_html,
    stratum_styles,
    write_map,
)

EVIL_BLOCK = '<img src=x onerror="window.__fp_pwned=1">'
EVIL_VARIETY = "</script><script>window.__fp_pwned=2</script>"


def _square(x0: float, y0: float, w: float, h: float) -> dict:
    ring = [[x0, y0], [x0 + w, y0], [x0 + w, y0 + h], [x0, y0 + h], [x0, y0]]
    return {"type": "Polygon", "coordinates": [ring]}


@pytest.fixture(scope="module")
def plan(tmp_path_factory):
    folder = tmp_path_factory.mktemp("estate")
    names = [("A1", "Syrah"), (EVIL_BLOCK, EVIL_VARIETY), ("B&'\"2", "=cmd|' /C calc'!A0")]
    features = [
        {
            "type": "Feature",
            "properties": {"block": name, "variety": variety},
            "geometry": _square(18.9 + i * 0.003, -33.86, 0.0025, 0.002),
        }
        for i, (name, variety) in enumerate(names)
    ]
    path = folder / "blocks.geojson"
    path.write_text(json.dumps({"type": "FeatureCollection", "features": features}))
    blocks = read_blocks(path)
    exclusions = gpd.GeoDataFrame(
        {"name": ["<b>wet</b> spot"]},
        geometry=[shapely.buffer(shapely.centroid(blocks.geometry.values[1]), 20.0)],
        crs=blocks.crs,
    )
    return make_plan(blocks, spacing=30.0, seed=3, exclusions=exclusions, command=["test"])


def _data(page: str) -> dict:
    match = re.search(r'<script type="application/json" id="fp-data">(.*?)</script>', page, re.S)
    assert match is not None
    return json.loads(match.group(1))


def test_page_loads_nothing_from_the_network(plan):
    page = map_html(plan)
    # reference: HTML Living Standard, elements that fetch: script src, link href,
    # img/iframe/source src, CSS url() and @import.
    assert not re.search(r"<(script|img|iframe|source|embed|object)[^>]*\ssrc\s*=", page, re.I)
    assert not re.search(r"<link\b", page, re.I)
    assert "@import" not in page
    for url in re.findall(r"url\(([^)]*)\)", page):
        # reference: RFC 2397 data: URLs carry their content inline.
        assert url.strip("'\"").startswith(("data:", "#")), url
    # Leaflet itself is inlined from the xstatic package.
    import xstatic.pkg.leaflet as xl

    js = (Path(xl.BASE_DIR) / "leaflet.js").read_text(encoding="utf-8")
    assert js.splitlines()[0] in page
    assert "sourceMappingURL" not in page


def test_point_coordinates_match_pyproj(plan):
    data = _data(map_html(plan))
    coords = np.c_[data["points"]["lon"], data["points"]["lat"]]
    ids = data["points"]["props"]["point_id"]
    assert ids == plan.points["point_id"].tolist()
    xy = shapely.get_coordinates(plan.points.geometry.values)
    # reference: pyproj.Transformer (PROJ) for UTM -> WGS84
    lon, lat = Transformer.from_crs(plan.crs, 4326, always_xy=True).transform(xy[:, 0], xy[:, 1])
    np.testing.assert_allclose(coords[:, 0], lon, atol=1e-7)
    np.testing.assert_allclose(coords[:, 1], lat, atol=1e-7)
    # Every point lies inside the fitted bounds.
    (s, w), (n, e) = data["bounds"]
    assert (coords[:, 0] >= w).all() and (coords[:, 0] <= e).all()
    assert (coords[:, 1] >= s).all() and (coords[:, 1] <= n).all()


def test_input_text_is_escaped_and_round_trips(plan):
    page = map_html(plan)
    # reference: HTML Living Standard 13.2.5.4 "script data state": '</script' and '<!--'
    # inside a script element end or alter it; OWASP XSS Prevention Cheat Sheet, rule 3.1
    # (JSON in HTML: escape <, >, & as \u003c, \u003e, \u0026).
    for raw in (EVIL_BLOCK, EVIL_VARIETY, "<b>wet</b>", "B&'"):
        assert raw not in page
    body = page.split('id="fp-data">', 1)[1].split("</script>", 1)[0]
    assert "<" not in body and ">" not in body and "&" not in body
    data = _data(page)
    names = {f["properties"]["block"] for f in data["blocks"]["features"]}
    varieties = {f["properties"]["variety"] for f in data["blocks"]["features"]}
    assert EVIL_BLOCK in names and EVIL_VARIETY in varieties
    assert data["exclusions"]["features"][0]["properties"]["name"] == "<b>wet</b> spot"
    # The page script writes data only through textContent.
    app = page.rsplit("<script>", 1)[1]
    assert "innerHTML" not in app and "insertAdjacentHTML" not in app and "eval(" not in app


def test_content_security_policy_pins_the_two_scripts(plan):
    page = map_html(plan)
    csp = re.search(r'http-equiv="Content-Security-Policy" content="([^"]*)"', page).group(1)
    csp = html.unescape(csp)
    hashes = set(re.findall(r"'sha256-([A-Za-z0-9+/=]+)'", csp))
    scripts = re.findall(r"<script>(.*?)</script>", page, re.S)
    assert len(scripts) == 2
    # reference: W3C Content Security Policy Level 3, section 8.4 (hash-source:
    # base64 of the SHA-256 digest of the script element's text).
    digests = {base64.b64encode(hashlib.sha256(s.encode()).digest()).decode() for s in scripts}
    assert digests == hashes
    assert "default-src 'none'" in csp


def test_caption_cautions_and_strata(plan):
    data = _data(map_html(plan))
    assert data["caption"]["seed"] == "3"
    assert data["caption"]["date"] == plan.meta["created_utc"][:10]
    assert data["cautions"] == list(CAUTIONS) == plan_cautions(plan)
    strata = {s["name"] for s in data["strata"]}
    assert strata == set(plan.points["stratum"].astype(str))
    # The online base layer is listed for the layer control, never added by default.
    assert data["osm"]["url"].startswith("https://")
    assert "osm.addTo" not in map_html(plan)


def test_palette_is_okabe_ito_and_styles_never_rely_on_colour_alone():
    # reference: Okabe & Ito (2008), Color Universal Design, eight-colour set (from memory)
    okabe_ito = {"#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7"}
    assert set(PALETTE) == okabe_ito
    styles = stratum_styles([f"s{i:02d}" for i in range(len(PALETTE) * len(SHAPES))])
    pairs = {(s["colour"], s["shape"]) for s in styles.values()}
    assert len(pairs) == len(styles)  # common practice, no source: shape + colour per class
    # Neighbouring strata differ in shape as well as colour.
    ordered = list(styles.values())
    assert all(a["shape"] != b["shape"] for a, b in zip(ordered, ordered[1:], strict=False))


def test_optional_layers_routes_spares_actual(plan):
    points = plan.points
    routes = gpd.GeoDataFrame(
        {"crew": ["1", "<i>2</i>"]},
        geometry=[
            shapely.linestrings(shapely.get_coordinates(points.geometry.values[:5])),
            shapely.linestrings(shapely.get_coordinates(points.geometry.values[5:9])),
        ],
        crs=plan.crs,
    )
    spares = points.iloc[:3].copy()
    spares["point_id"] = ["S-1", "S-2", "S-3"]
    actual = points.iloc[:2][["point_id", "geometry"]].copy()
    page = map_html(plan, routes=routes, spares=spares, actual=actual)
    data = _data(page)
    assert [c["name"] for c in data["crews"]] == ["1", "<i>2</i>"]
    numbered = routes.iloc[[0, 0, 0]].copy()
    numbered["crew"] = [10, 9, 1]
    crews = _data(map_html(plan, routes=numbered))["crews"]
    assert [c["name"] for c in crews] == ["1", "9", "10"]  # common practice, no source
    assert len(data["routes"]["features"]) == 2
    assert data["spares"]["props"]["point_id"] == ["S-1", "S-2", "S-3"]
    assert data["actual"]["n"] == 2
    assert "<i>2</i>" not in page


def test_recorded_positions_from_a_lon_lat_table_and_plan_code(plan):
    import dataclasses

    import pandas as pd

    table = pd.DataFrame(
        {"point_id": ["P-1", "P-2"], "actual_lon": [18.9012345, None], "actual_lat": [-33.8591, None]}
    )
    data = _data(map_html(plan, actual=table))
    # Rows without a position are left out; coordinates pass through unchanged.
    assert data["actual"]["props"]["point_id"] == ["P-1"]
    assert data["actual"]["lon"] == [18.9012345] and data["actual"]["lat"] == [-33.8591]
    coded = dataclasses.replace(plan, params={**plan.params, "plan_id": "K7Q2"})
    assert _data(map_html(coded))["caption"]["plan_id"] == "K7Q2"


def test_marker_mode_switches_to_canvas_for_large_plans(plan):
    from fieldplan.errors import OptionError

    assert _data(map_html(plan))["marker_mode"] == "dom"
    assert _data(map_html(plan, markers="canvas"))["marker_mode"] == "canvas"
    with pytest.raises(OptionError, match="markers must be one of"):
        map_html(plan, markers="webgl")


def test_write_map_is_deterministic(plan, tmp_path):
    a = write_map(plan, tmp_path / "a.html").read_bytes()
    b = write_map(plan, tmp_path / "b.html").read_bytes()
    assert a == b  # common practice, no source: reproducible outputs compare byte for byte


def test_inaccessible_points_get_their_own_layer_symbol_and_legend(plan):
    import dataclasses

    from fieldplan.write.html_map import INACCESSIBLE_STYLE

    points = plan.points.copy()
    points["status"] = "selected"
    gone = points["point_id"].iloc[[1, 4]].tolist()
    points.loc[points["point_id"].isin(gone), "status"] = "inaccessible"
    page = map_html(dataclasses.replace(plan, points=points))
    data = _data(page)
    assert data["inaccessible"]["props"]["point_id"] == gone
    assert data["points"]["n"] == len(points) - 2 and not set(gone) & set(data["points"]["props"]["point_id"])
    # WCAG 2.1 SC 1.4.1 "Use of Color": not by colour alone, so a shape no stratum uses
    # reference: W3C Web Content Accessibility Guidelines 2.1, success criterion 1.4.1
    style = data["inaccessible_style"]
    assert style == INACCESSIBLE_STYLE
    assert style["shape"] not in {s["shape"] for s in data["strata"]} and style["shape"] not in SHAPES
    assert style["colour"] not in PALETTE
    assert "inaccessible" in style["legend"].lower()
    assert "Inaccessible points (not sampled)" in page  # the layer toggle
    # Without marks nothing changes: no inaccessible layer, every point drawn as planned.
    plain = _data(map_html(plan))
    assert plain["inaccessible"]["n"] == 0 and plain["points"]["n"] == len(plan.points)


def test_folium_element_names_are_stable_across_processes(tmp_path):
    import subprocess
    import sys

    code = (
        "import sys; from fieldplan.demo import make_demo_plan; "
        "from fieldplan.write.html_map import write_map; write_map(make_demo_plan(), sys.argv[1])"
    )
    pages = []
    for name in ("a.html", "b.html"):
        subprocess.run([sys.executable, "-c", code, str(tmp_path / name)], check=True)
        pages.append((tmp_path / name).read_bytes())
    # common practice, no source: reproducible outputs compare byte for byte
    assert pages[0] == pages[1]
    page = pages[0].decode("utf-8")
    # branca names elements <kind>_<32 random hex digits>; none is left in the page.
    assert not re.search(r"_[0-9a-f]{32}\b", page)
    assert re.search(r"var map_1 = L\.map\(", page)


def test_demo_map_size_and_no_cdn_asset():
    import folium

    from fieldplan.demo import make_demo_plan

    page = map_html(make_demo_plan())
    assert len(page.encode("utf-8")) <= 400_000  # the project's size budget for the demo map
    # reference: folium.Map.default_js / default_css, the CDN assets folium's own page loads
    for _, url in (*folium.Map.default_js, *folium.Map.default_css):
        assert url not in page
    assert "cdn" not in page.lower()
