"""fieldplan.explore(): the plan's map as a folium.Map for notebooks, same layers as map.html."""

from __future__ import annotations

import json
import re

import folium
import geopandas as gpd
import numpy as np
import pytest

import fieldplan
from fieldplan.demo import make_demo_plan
from fieldplan.store import write_plan

ISLAND = re.compile(r'<script type="application/json" id="fp-data">(.*?)</script>', re.S)


@pytest.fixture(scope="module")
def plan():
    return make_demo_plan()


def _island(page: str) -> dict:
    match = ISLAND.search(page)
    assert match is not None
    return json.loads(match.group(1))


def _overlays(page: str) -> list[str]:
    block = page.split("overlays :", 1)[1].split("}", 1)[0]
    return [json.loads(name) for name in re.findall(r'("(?:[^"\\]|\\.)*")\s*:', block)]


def test_explore_returns_a_folium_map_holding_every_block_and_point(plan):
    m = fieldplan.explore(plan)
    # reference: folium's public API: a Map renders to its page with get_root().render()
    assert isinstance(m, folium.Map)
    page = m.get_root().render()
    data = _island(page)
    assert sorted(f["properties"]["block"] for f in data["blocks"]["features"]) == sorted(
        plan.blocks["block"]
    )
    assert data["points"]["props"]["point_id"] == plan.points["point_id"].tolist()
    assert data["points"]["n"] == len(plan.points)
    # Every block polygon has its geometry (what the blocks layer draws) in WGS84.
    drawn = gpd.GeoDataFrame.from_features(data["blocks"]["features"], crs=4326)
    # reference: geopandas to_crs (PROJ) of the plan's blocks; coordinates kept to 1e-7 degree
    expected = plan.blocks.to_crs(4326)
    np.testing.assert_allclose(drawn.total_bounds, expected.total_bounds, atol=1e-7)
    np.testing.assert_allclose(drawn.to_crs(plan.crs).area, expected.to_crs(plan.crs).area, rtol=1e-4)
    # The same layers as map.html, in the layer control.
    assert _overlays(page) == [
        "Blocks",
        "Exclusions (not sampled)",
        "Sample points",
        "OpenStreetMap (online only)",
    ]
    layers = [child for child in m._children.values() if isinstance(child, folium.GeoJson)]
    assert layers and all(layer.layer_name for layer in layers)


def test_explore_uses_folium_cdn_page_unless_offline(plan):
    online = fieldplan.explore(plan).get_root().render()
    offline = fieldplan.explore(plan, offline=True).get_root().render()
    # reference: folium.Map.default_js / default_css, the assets folium's page links to
    urls = [url for _, url in (*folium.Map.default_js, *folium.Map.default_css)]
    assert any(url in online for url in urls)
    assert not any(url in offline for url in urls)
    assert "<link" not in offline and not re.search(r"<script[^>]*\ssrc=", offline)


def test_users_add_their_own_layers(plan):
    m = plan.explore(basemap=True)
    lat, lon = plan.points.to_crs(4326).geometry.iloc[0].coords[0][::-1]
    folium.Marker([lat, lon], tooltip="water trough").add_to(m)
    folium.LayerControl().add_to(m)
    page = m.get_root().render()
    assert "water trough" in page and "L.marker(" in page
    assert _island(page)["points"]["n"] == len(plan.points)
    # basemap=True adds the OpenStreetMap layer to the map on opening.
    tile = re.search(r"var (tile_layer_\w+) = L\.tileLayer\(", page).group(1)
    assert f"{tile}.addTo(" in page


def test_explore_a_plan_folder(plan, tmp_path):
    folder = tmp_path / "estate"
    write_plan(plan, folder, formats=["core"])
    data = _island(fieldplan.explore(folder).get_root().render())
    assert data["points"]["props"]["point_id"] == plan.points["point_id"].tolist()
    assert data["caption"]["seed"] == str(plan.seed)


def test_offline_map_saved_by_folium_is_the_map_file(plan, tmp_path):
    from fieldplan.write.html_map import map_html

    m = fieldplan.explore(plan, offline=True)
    m.save(tmp_path / "m.html")
    # common practice, no source: reproducible outputs compare byte for byte
    assert (tmp_path / "m.html").read_text(encoding="utf-8") == map_html(plan)


def test_map_module_imports_no_folium():
    import subprocess
    import sys

    code = "import sys, fieldplan.write.html_map, fieldplan.write.gpx; print('folium' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def test_explore_checks_marker_mode(plan):
    from fieldplan.errors import OptionError

    with pytest.raises(OptionError, match="markers must be one of"):
        fieldplan.explore(plan, markers="webgl")
    data = _island(fieldplan.explore(plan, markers="canvas").get_root().render())
    assert data["marker_mode"] == "canvas"
