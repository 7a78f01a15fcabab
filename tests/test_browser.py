"""map.html in headless Chromium: offline, no errors, every point drawn, names stay text.

Run ``python tests/test_browser.py`` to refresh docs/demo_map.png from the demo estate.
"""

from __future__ import annotations

import io
import json
import sys
from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
import shapely

CHROMIUM = Path("/usr/bin/chromium")
ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]
EVIL_BLOCK = '<img src=x onerror="window.__fp_pwned=1">'
EVIL_VARIETY = "</script><script>window.__fp_pwned=2</script>\"'"
EVIL_CREW = "<svg onload=window.__fp_pwned=3>"

pytestmark = pytest.mark.browser


def _square(x0: float, y0: float, w: float, h: float) -> dict:
    ring = [[x0, y0], [x0 + w, y0], [x0 + w, y0 + h], [x0, y0 + h], [x0, y0]]
    return {"type": "Polygon", "coordinates": [ring]}


def _open(pw, html_path: Path, user_dir: Path, *, size=(1280, 800)):
    """Open ``html_path`` in a fresh Chromium profile; return (context, page, log)."""
    log = {"requests": [], "errors": []}
    context = pw.chromium.launch_persistent_context(
        str(user_dir),
        executable_path=str(CHROMIUM),
        headless=True,
        args=ARGS,
        viewport={"width": size[0], "height": size[1]},
        service_workers="block",
    )
    page = context.new_page()

    def route(r):
        if r.request.url.startswith("file://"):
            r.continue_()
        else:
            log["requests"].append(r.request.url)
            r.abort()

    context.route("**/*", route)
    page.on("console", lambda m: log["errors"].append(m.text) if m.type == "error" else None)
    page.on("pageerror", lambda e: log["errors"].append(str(e)))
    page.goto(html_path.resolve().as_uri())
    page.wait_for_function("window.fieldplanMap !== undefined")
    page.wait_for_timeout(300)
    return context, page, log


@pytest.fixture(scope="module")
def map_file(tmp_path_factory):
    if not CHROMIUM.exists():
        pytest.skip("needs Debian's chromium at /usr/bin/chromium (apt-get install -y chromium)")
    from fieldplan.plan import make_plan
    from fieldplan.read import read_blocks
    from fieldplan.write.html_map import write_map

    folder = tmp_path_factory.mktemp("estate")
    names = [("A1", "Syrah"), (EVIL_BLOCK, EVIL_VARIETY), ("B&2", "Merlot")]
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
        {"name": ["<script>window.__fp_pwned=4</script>"]},
        geometry=[shapely.buffer(shapely.centroid(blocks.geometry.values[0]), 25.0)],
        crs=blocks.crs,
    )
    plan = make_plan(blocks, spacing=30.0, seed=3, exclusions=exclusions, command=["test"])
    plan.points["units"] = np.arange(len(plan.points)) % 3 + 1
    # The last two points marked inaccessible (as `fieldplan mark` does): drawn apart.
    plan.points["status"] = np.where(
        np.arange(len(plan.points)) >= len(plan.points) - 2, "inaccessible", "selected"
    )
    xy = shapely.get_coordinates(plan.points.geometry.values)
    routes = gpd.GeoDataFrame(
        {"crew": ["1", EVIL_CREW]},
        geometry=[shapely.linestrings(xy[:6]), shapely.linestrings(xy[6:12])],
        crs=plan.crs,
    )
    spares = plan.points.iloc[:4].copy()
    spares["point_id"] = [f"S-{i}" for i in range(4)]
    out = write_map(plan, folder / "map.html", routes=routes, spares=spares)
    write_map(plan, folder / "map_canvas.html", routes=routes, spares=spares, markers="canvas")
    return out, plan


@pytest.fixture(scope="module")
def playwright_driver(map_file):
    from playwright.sync_api import sync_playwright

    with sync_playwright() as pw:
        yield pw


@pytest.fixture(scope="module")
def opened(map_file, playwright_driver, tmp_path_factory):
    path, plan = map_file
    profile = tmp_path_factory.mktemp("chromium-profile")
    context, page, log = _open(playwright_driver, path, profile)
    yield page, log, plan
    context.close()


def test_map_opens_offline_without_errors(opened):
    page, log, plan = opened
    # common practice, no source: an offline page must make no request beyond file://
    assert log["requests"] == []
    assert log["errors"] == []
    n_gone = int((plan.points["status"] == "inaccessible").sum())
    assert n_gone == 2
    assert page.locator(".fp-point").count() == len(plan.points) - n_gone
    assert page.evaluate("fieldplanLayers.points.getLayers().length") == len(plan.points) - n_gone
    # Inaccessible points: on by default, struck through (two lines each), and in the legend.
    assert page.locator(".fp-inaccessible").count() == n_gone
    assert page.locator(".fp-inaccessible line.fp-strike").count() == 2 * n_gone
    legend = page.locator(".fp-legend").inner_text()
    assert "Inaccessible point" in legend and page.locator(".fp-legend line.fp-strike").count() == 2
    # Fit to bounds: every point is inside the initial view.
    assert page.evaluate(
        """() => fieldplanLayers.points.getLayers()
             .every((m) => fieldplanMap.getBounds().contains(m.getLatLng()))"""
    )
    assert page.locator(".fp-spare").count() == 0  # spare points are off by default
    assert page.locator(".leaflet-tile").count() == 0  # base layer off by default
    assert page.locator(".leaflet-control-scale-line").count() == 1


def test_screenshot_is_not_blank(opened):
    from PIL import Image

    page, _, _ = opened
    shot = np.asarray(Image.open(io.BytesIO(page.screenshot())).convert("L"), dtype=float)
    # common practice, no source: a drawn map has strong pixel variance, a blank one none
    assert shot.var() > 100.0


def test_hostile_names_render_as_text(opened):
    page, _, _ = opened
    # reference: OWASP XSS Prevention Cheat Sheet: payloads must not execute
    assert page.evaluate("window.__fp_pwned") is None
    labels = page.locator(".fp-block-label").all_text_contents()
    assert any(EVIL_BLOCK in t and EVIL_VARIETY in t for t in labels)
    assert page.locator(".fp-block-label img").count() == 0
    legend = page.locator(".leaflet-control-layers").inner_text()
    assert f"Route: crew {EVIL_CREW}" in legend
    assert page.locator("svg[onload]").count() == 0


def test_popup_shows_point_details(opened):
    page, log, plan = opened
    first = plan.points.iloc[0]
    page.locator(".fp-point").first.click()
    popup = page.locator(".leaflet-popup-content").inner_text()
    assert first["point_id"] in popup and "Units" in popup
    assert page.evaluate("window.__fp_pwned") is None
    assert log["errors"] == []


def test_spares_toggle_and_hatched_exclusions(opened):
    page, log, _ = opened
    page.get_by_label("Spare points").check()
    assert page.locator(".fp-spare").count() == 4
    page.get_by_label("Spare points").uncheck()
    assert page.locator(".fp-spare").count() == 0
    # reference: SVG 1.1 section 14.3 pattern fill via url(#id) on the exclusion path
    assert page.locator("pattern#fp-hatch").count() == 1
    assert page.locator('path[fill="url(#fp-hatch)"]').count() == 1
    assert log["errors"] == []


def test_base_layer_loads_only_when_switched_on(opened):
    page, log, _ = opened
    # Switching the online layer on is what makes the first request: proves the
    # earlier silence is the page's doing, not a broken route hook.
    page.get_by_label("OpenStreetMap (online only)").check()
    page.wait_for_timeout(300)
    assert log["requests"] and all(u.startswith("https://tile.openstreetmap.org/") for u in log["requests"])


def test_canvas_markers_for_large_plans(map_file, playwright_driver, tmp_path):
    path, plan = map_file
    context, page, log = _open(playwright_driver, path.with_name("map_canvas.html"), tmp_path / "profile")
    try:
        assert log["requests"] == [] and log["errors"] == []
        assert page.locator(".fp-point").count() == 0  # drawn on a canvas, not as elements
        n_gone = int((plan.points["status"] == "inaccessible").sum())
        assert page.evaluate("fieldplanLayers.points.getLayers().length") == len(plan.points) - n_gone
        assert page.evaluate("fieldplanLayers.inaccessible.getLayers().length") == n_gone
        # Click the drawn marker nearest the map centre: the canvas hit test opens its popup.
        target = page.evaluate(
            """() => {
              const map = fieldplanMap, c = map.getSize().divideBy(2);
              let best = null, bestD = Infinity;
              fieldplanLayers.points.eachLayer((m) => {
                const p = map.latLngToContainerPoint(m.getLatLng()), d = p.distanceTo(c);
                if (d < bestD) { bestD = d; best = { x: p.x, y: p.y, id: m.options.label }; }
              });
              return best;
            }"""
        )
        box = page.locator("#map").bounding_box()
        page.mouse.click(box["x"] + target["x"], box["y"] + target["y"])
        page.wait_for_selector(".leaflet-popup-content")
        assert target["id"] in page.locator(".leaflet-popup-content").inner_text()
        assert page.evaluate("window.__fp_pwned") is None
    finally:
        context.close()


def save_demo_screenshot(out: Path) -> Path:
    """Render the demo estate's map and save a screenshot (docs/demo_map.png)."""
    import tempfile

    from playwright.sync_api import sync_playwright

    from fieldplan.demo import make_demo_plan
    from fieldplan.write.html_map import write_map

    with tempfile.TemporaryDirectory() as tmp:
        html = write_map(make_demo_plan(), Path(tmp) / "map.html")
        with sync_playwright() as pw:
            context, page, log = _open(pw, html, Path(tmp) / "profile", size=(1280, 860))
            try:
                if log["requests"] or log["errors"]:
                    raise RuntimeError(f"demo map not clean: {log}")
                page.screenshot(path=str(out))
            finally:
                context.close()
    return out


if __name__ == "__main__":
    target = Path(sys.argv[1]) if len(sys.argv) > 1 else Path(__file__).parents[1] / "docs" / "demo_map.png"
    print(save_demo_screenshot(target))
