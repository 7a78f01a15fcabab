"""The workspace in headless Chromium: a season from upload to readiness, offline, no errors.

A real server (uvicorn on 127.0.0.1, a free port) serves a fresh workspace; the
browser may reach nothing else. Run ``python tests/test_web_browser.py`` to refresh
the screenshots in docs/ (workspace_*.png) from the demo estate.
"""

from __future__ import annotations

import csv
import io
import socket
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("fastapi")
pytest.importorskip("uvicorn")

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
DOCS = Path(__file__).resolve().parents[1] / "docs"
pytestmark = pytest.mark.browser


class LiveServer:
    """uvicorn serving ``create_app(workspace)`` on 127.0.0.1 in a thread."""

    def __init__(self, workspace: Path, **options) -> None:
        import uvicorn

        from fieldplan.web.app import create_app

        # The socket is bound here and handed to uvicorn: no other process can take the port between.
        self.sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        self.sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
        self.sock.bind(("127.0.0.1", 0))
        self.port = self.sock.getsockname()[1]
        self.app = create_app(workspace, **options)
        self.server = uvicorn.Server(
            uvicorn.Config(self.app, host="127.0.0.1", port=self.port, log_level="warning")
        )
        self.thread = threading.Thread(target=self.server.run, kwargs={"sockets": [self.sock]}, daemon=True)
        self.thread.start()
        end = time.monotonic() + 20
        while not self.server.started:
            if time.monotonic() > end:
                raise RuntimeError("server did not start")
            time.sleep(0.05)
        self.base = f"http://127.0.0.1:{self.port}"

    def stop(self) -> None:
        self.server.should_exit = True
        self.thread.join(timeout=10)
        self.sock.close()


def open_browser(pw, base: str, *, size=(1400, 900)):
    """Chromium with every request outside ``base`` refused and logged; console errors logged."""
    log = {"requests": [], "errors": []}
    browser = pw.chromium.launch(executable_path=str(CHROMIUM), headless=True, args=ARGS)
    context = browser.new_context(viewport={"width": size[0], "height": size[1]}, service_workers="block")

    def route(r):
        if r.request.url.startswith(base + "/"):
            r.continue_()
        else:
            log["requests"].append(r.request.url)
            r.abort()

    context.route("**/*", route)
    page = context.new_page()
    page.set_default_timeout(60_000)  # a shared, busy machine: waits are generous, never timed results
    page.on("console", lambda m: log["errors"].append(m.text) if m.type == "error" else None)
    page.on("pageerror", lambda e: log["errors"].append(str(e)))
    return browser, page, log


def results_csv(points_csv: Path, out: Path, *, rng_seed: int = 3) -> Path:
    """Invented Brix readings for the plan's points to sample, with one bad cell (row 3)."""
    rng = np.random.default_rng(rng_seed)
    with points_csv.open(encoding="utf-8") as handle:
        rows = [r for r in csv.DictReader(handle) if r.get("status", "selected") != "spare"]
    buf = io.StringIO()
    buf.write("point_id,brix,date\n")
    for i, r in enumerate(rows):
        block_level = 21.0 + (sum(map(ord, r["block"])) % 5) * 0.6
        value = "2O.5" if i == 1 else f"{block_level + rng.normal(0, 0.3):.1f}"
        buf.write(f"{r['point_id']},{value},2027-02-10\n")
    out.write_text(buf.getvalue(), encoding="utf-8")
    return out


def run_season(page, base: str, workspace: Path, tmp: Path, *, shots: Path | None = None) -> dict:
    """Upload, preview, save, crews, results, readiness, mark: what a user does in one season."""
    from fieldplan.demo import demo_blocks_path, demo_exclusions_path

    seen = {}
    page.goto(base + "/new")
    page.wait_for_selector("#f-design")
    page.set_input_files("#blocks-file", str(demo_blocks_path()))
    page.set_input_files("#exclusions-file", str(demo_exclusions_path()))
    page.click("#upload-form button[type=submit]")
    page.wait_for_selector("#upload-msg.fp-msg-ok")
    # (wait_for_selector, not wait_for_function: the pages' CSP forbids eval, which that uses)
    page.wait_for_selector("#attr-table tbody tr")
    seen["outline"] = page.locator("path.fp-outline").count()
    page.select_option("#f-design", "random")
    page.fill("#f-per_block", "3")
    page.fill("#f-spares", "2")
    page.select_option("#f-purpose", "ripeness")
    page.fill("#seed", "7")
    page.click("#preview-btn")
    page.wait_for_selector("#preview-msg.fp-msg-ok", timeout=90_000)
    page.wait_for_timeout(300)
    seen["preview_points"] = page.locator(".fp-point").count()
    seen["preview_text"] = page.inner_text("#preview-msg")
    if shots:
        page.evaluate("window.scrollTo(0, 0)")
        page.screenshot(path=str(shots / "workspace_new.png"))
    page.fill("#plan-name", "harvest-2027")
    page.click("#save-btn")
    page.wait_for_selector("#open-plan", timeout=90_000)
    page.click("#open-plan")
    page.wait_for_selector("body[data-loaded]")
    seen["plan_points"] = page.locator(".fp-point").count()

    # Crews, starting from a drop-off picked on the map.
    page.click("#pick-dropoff")
    box = page.locator("#map").bounding_box()
    page.mouse.click(box["x"] + 40, box["y"] + box["height"] - 40)
    seen["dropoff"] = page.inner_text("#dropoff-text")
    page.fill('#crews-form input[name="crews"]', "2")
    page.click("#crews-form button[type=submit]")
    page.wait_for_selector("#crews-msg.fp-msg-ok", timeout=60_000)
    page.wait_for_selector("path.fp-route")
    seen["routes"] = page.locator("path.fp-route").count()
    seen["crew_rows"] = page.locator("#crews-now tbody tr").count()

    # Results, with a problem listed by row.
    csv_path = results_csv(workspace / "harvest-2027" / "points.csv", tmp / "brix_round1.csv")
    page.set_input_files('#results-form input[type="file"]', str(csv_path))
    page.click("#results-form button[type=submit]")
    page.wait_for_selector("#results-problems table", timeout=60_000)
    seen["results_msg"] = page.inner_text("#results-msg")
    seen["problems"] = page.locator("#results-problems tbody tr").all_inner_texts()

    # Estimates with a target: the readiness map.
    page.wait_for_selector("#value-select option", state="attached")
    page.select_option("#value-select", "brix")
    page.fill('#estimates-form input[name="target"]', "22")
    page.click("#estimates-form button[type=submit]")
    page.wait_for_selector(".fp-ready-legend")
    page.wait_for_timeout(200)
    seen["legend"] = page.inner_text(".fp-ready-legend")
    seen["fills"] = page.evaluate(
        """() => Array.from(document.querySelectorAll('path.fp-block')).map((p) => p.getAttribute('fill'))"""
    )
    seen["estimate_rows"] = page.locator("#estimates-out tbody tr").count()
    page.locator("#estimates").scroll_into_view_if_needed()
    if shots:
        page.evaluate("window.scrollTo(0, 0)")
        page.screenshot(path=str(shots / "workspace_readiness.png"))
    # A block's popup gives the projected date.
    # Block labels let clicks through to the block under them (a point may sit there: try a few).
    seen["block_popup"] = ""
    for label in page.locator(".fp-block-label span").all()[:6]:
        b = label.bounding_box()
        page.mouse.click(b["x"] + b["width"] / 2, b["y"] + b["height"] + 4)
        page.wait_for_selector(".leaflet-popup-content")
        seen["block_popup"] = page.inner_text(".leaflet-popup-content")
        if "Projected date" in seen["block_popup"]:
            break
    page.locator(".leaflet-popup-close-button").click()

    # Mark a point inaccessible from its popup: its spare steps in.
    target = page.evaluate(
        """() => { const el = document.querySelector('.fp-point:not(.fp-stepped-in)');
                   return el.getAttribute('title'); }"""
    )
    marker = page.locator(f'.fp-point[title="{target}"]')
    marker.scroll_into_view_if_needed()
    marker.dispatch_event("click")  # the marker may sit under a legend panel
    page.wait_for_selector(".fp-mark-form")
    page.select_option('.fp-mark-form select[name="reason"]', index=0)
    page.fill('.fp-mark-form input[name="by"]', "Thandi")
    page.click(".fp-mark-form button[type=submit]")
    page.wait_for_selector("#page-msg.fp-msg-ok")
    seen["mark_msg"] = page.inner_text("#page-msg")
    seen["target"] = target
    page.wait_for_selector(".fp-stepped-in")
    seen["stepped_in"] = page.locator(".fp-stepped-in").get_attribute("title")
    seen["inaccessible"] = page.locator(".fp-inaccessible").count()
    seen["events"] = page.inner_text("#events-out")
    seen["spare_popup"] = (
        page.inner_text(".leaflet-popup-content") if page.locator(".leaflet-popup-content").count() else ""
    )
    if shots:
        page.evaluate("window.scrollTo(0, 0)")
        page.screenshot(path=str(shots / "workspace_plan.png"))
        page.goto(base + "/")
        page.screenshot(path=str(shots / "workspace_home.png"))
    return seen


@pytest.fixture(scope="module")
def season(tmp_path_factory):
    if not CHROMIUM.exists():
        pytest.skip("needs Debian's chromium at /usr/bin/chromium (apt-get install -y chromium)")
    from playwright.sync_api import sync_playwright

    tmp = tmp_path_factory.mktemp("web-season")
    workspace = tmp / "ws"
    workspace.mkdir()
    server = LiveServer(workspace)
    try:
        with sync_playwright() as pw:
            browser, page, log = open_browser(pw, server.base)
            try:
                seen = run_season(page, server.base, workspace, tmp)
                page.goto(server.base + "/")
                seen["home"] = page.inner_text("#plans")
                page.goto(server.base + "/api/docs")
                seen["api_docs"] = page.locator("#api-endpoints tbody tr").count()
            finally:
                browser.close()
    finally:
        server.stop()
    return seen, log, workspace


def test_no_request_leaves_the_machine_and_no_console_errors(season):
    _, log, _ = season
    # common practice, no source: a workspace used offline makes no request beyond its server
    assert log["requests"] == []
    assert log["errors"] == []


def test_upload_preview_and_save(season):
    seen, _, workspace = season
    assert seen["outline"] == 14  # the demo estate's 14 blocks drawn from the upload
    assert seen["preview_points"] == 14 * 3 and "42 points and 28 spares" in seen["preview_text"]
    assert (workspace / "harvest-2027" / "plan.gpkg").is_file()
    assert seen["plan_points"] == 14 * 3
    assert "harvest-2027" in seen["home"]


def test_crews_assigned_from_a_picked_drop_off(season):
    seen, _, workspace = season
    assert "Drop-off at" in seen["dropoff"]
    assert seen["routes"] >= 2 and seen["crew_rows"] == 2
    import pandas as pd

    crews = pd.read_csv(workspace / "harvest-2027" / "crews.csv")
    assert crews["n_points"].sum() == 14 * 3  # every point to sample has a crew


def test_results_problems_listed_by_row(season):
    seen, _, _ = season
    assert "Stored round 1" in seen["results_msg"]
    # Row 3 of the file (header = row 1) holds '2O.5', a letter O for a zero.
    assert any(r.startswith("3") and "not a number" in r for r in seen["problems"])


def test_readiness_map_coloured_with_legend(season):
    from fieldplan.web.service import READINESS_COLOURS

    seen, _, _ = season
    assert "P(reached 22)" in seen["block_popup"] and "Projected date" in seen["block_popup"]
    assert "Readiness" in seen["legend"] and "0.8 – 1.0" in seen["legend"] and "no estimate" in seen["legend"]
    fills = [f.lower() for f in seen["fills"]]
    coloured = [f for f in fills if f in READINESS_COLOURS]
    # Every block has its own estimate here, so every block takes a class colour.
    assert len(coloured) == 14
    assert len(set(coloured)) >= 2
    assert seen["estimate_rows"] == 15  # 14 blocks and the whole estate


def test_mark_a_point_and_see_the_spare(season):
    import pandas as pd

    seen, _, workspace = season
    assert seen["target"] in seen["mark_msg"] and "steps in" in seen["mark_msg"]
    assert seen["stepped_in"] and seen["stepped_in"] in seen["mark_msg"]
    assert seen["inaccessible"] == 1
    # The events table lists the change with who made it, as `fieldplan mark --recorded-by` records it.
    assert (
        seen["target"] in seen["events"]
        and "Thandi" in seen["events"]
        and seen["stepped_in"] in seen["events"]
    )
    points = pd.read_csv(workspace / "harvest-2027" / "points.csv").set_index("point_id")
    assert points.loc[seen["target"], "status"] == "inaccessible"
    assert points.loc[seen["stepped_in"], "status"] == "replacement"
    # The spare comes from the same block as the point it stands in for (its stratum).
    assert points.loc[seen["stepped_in"], "block"] == points.loc[seen["target"], "block"]


def test_api_docs_page_lists_the_endpoints(season):
    seen, _, _ = season
    assert seen["api_docs"] >= 15


def save_screenshots(out: Path = DOCS) -> list[Path]:
    """Run the season on the demo estate and keep a screenshot of each page in ``out``."""
    import tempfile

    from playwright.sync_api import sync_playwright

    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        workspace = tmp / "ws"
        workspace.mkdir()
        from benchmarks.web_bench import demo_workspace

        demo_workspace(workspace)  # the demo plans of `make demo` beside the one made here
        server = LiveServer(workspace)
        try:
            with sync_playwright() as pw:
                browser, page, log = open_browser(pw, server.base, size=(1400, 900))
                try:
                    run_season(page, server.base, workspace, tmp, shots=out)
                finally:
                    browser.close()
        finally:
            server.stop()
        if log["requests"] or log["errors"]:
            raise RuntimeError(f"workspace pages not clean: {log}")
    return sorted(out.glob("workspace_*.png"))


if __name__ == "__main__":
    print(*save_screenshots(Path(sys.argv[1]) if len(sys.argv) > 1 else DOCS), sep="\n")


EVIL_BLOCK = '<img src=x onerror="window.__fp_pwned=1">'
EVIL_VARIETY = "</script><script>window.__fp_pwned=2</script>\"'"


def test_hostile_names_stay_text(tmp_path):
    """Block names and varieties from a file reach the pages as text, in the table, map and popups."""
    if not CHROMIUM.exists():
        pytest.skip("needs Debian's chromium at /usr/bin/chromium")
    import json

    from playwright.sync_api import sync_playwright
    from typer.testing import CliRunner

    from fieldplan.cli.main import app as cli

    def square(x0):
        ring = [[x0, -33.86], [x0 + 0.0025, -33.86], [x0 + 0.0025, -33.858], [x0, -33.858], [x0, -33.86]]
        return {"type": "Polygon", "coordinates": [ring]}

    names = [("A1", "Syrah"), (EVIL_BLOCK, EVIL_VARIETY)]
    features = [
        {"type": "Feature", "properties": {"block": b, "variety": v}, "geometry": square(18.9 + i * 0.003)}
        for i, (b, v) in enumerate(names)
    ]
    path = tmp_path / "hostile.geojson"
    path.write_text(json.dumps({"type": "FeatureCollection", "features": features}), encoding="utf-8")
    ws = tmp_path / "ws"
    ws.mkdir()
    result = CliRunner().invoke(cli, ["plan", str(path), "--spacing", "50", "--out", str(ws / "h"), "-q"])
    assert result.exit_code == 0, result.output
    server = LiveServer(ws)
    try:
        with sync_playwright() as pw:
            browser, page, log = open_browser(pw, server.base)
            try:
                page.goto(server.base + "/plans/h")
                page.wait_for_selector("body[data-loaded]")
                labels = page.locator(".fp-block-label").all_text_contents()
                page.goto(server.base + "/new")
                page.wait_for_selector("#f-design")
                page.set_input_files("#blocks-file", str(path))
                page.click("#upload-form button[type=submit]")
                page.wait_for_selector("#attr-table tbody tr")
                table = page.inner_text("#attr-table")
                pwned = page.evaluate("() => window.__fp_pwned === undefined ? null : window.__fp_pwned")
                images = page.locator("#attr-table img, .fp-block-label img").count()
            finally:
                browser.close()
    finally:
        server.stop()
    # reference: OWASP XSS Prevention Cheat Sheet: payloads from data must not execute
    assert pwned is None and images == 0
    assert any(EVIL_BLOCK in t and EVIL_VARIETY in t for t in labels)
    assert EVIL_BLOCK in table and EVIL_VARIETY.strip() in table
    assert log["requests"] == [] and log["errors"] == []


def test_large_plan_drawn_on_a_canvas(tmp_path):
    """Above map.html's DOM_MARKER_LIMIT the plan page draws points on one canvas, with no errors."""
    if not CHROMIUM.exists():
        pytest.skip("needs Debian's chromium at /usr/bin/chromium")
    import pandas as pd
    from playwright.sync_api import sync_playwright
    from typer.testing import CliRunner

    from fieldplan.cli.main import app as cli
    from fieldplan.demo import demo_blocks_path
    from fieldplan.write.html_map import DOM_MARKER_LIMIT

    ws = tmp_path / "ws"
    ws.mkdir()
    result = CliRunner().invoke(
        cli, ["plan", str(demo_blocks_path()), "--spacing", "14", "--out", str(ws / "dense"), "-q"]
    )
    assert result.exit_code == 0, result.output
    n = len(pd.read_csv(ws / "dense" / "points.csv"))
    assert n > DOM_MARKER_LIMIT
    server = LiveServer(ws)
    try:
        with sync_playwright() as pw:
            browser, page, log = open_browser(pw, server.base)
            try:
                page.goto(server.base + "/plans/dense")
                page.wait_for_selector("body[data-loaded]")
                page.wait_for_timeout(300)
                dom_points = page.locator(".fp-point").count()
                canvases = page.locator(".leaflet-fp-points-pane canvas").count()
                legend = page.inner_text(".fp-legend")
            finally:
                browser.close()
    finally:
        server.stop()
    assert dom_points == 0 and canvases == 1
    assert "Stratum F01" in legend
    assert log["requests"] == [] and log["errors"] == []


def test_plan_made_in_the_browser_equals_the_cli(season, tmp_path, monkeypatch):
    """The plan saved from the page has the point files `fieldplan plan` writes for the same choices."""
    from typer.testing import CliRunner

    from fieldplan.cli.main import app as cli
    from fieldplan.demo import demo_blocks_path, demo_exclusions_path

    _, _, workspace = season
    # The exclusions are recorded by file name: run the command beside them, as a user would.
    monkeypatch.chdir(demo_exclusions_path().parent)
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1800000000")
    result = CliRunner().invoke(
        cli,
        ["plan", str(demo_blocks_path()), "--exclude", demo_exclusions_path().name, "--design", "random",
         "--per-block", "3", "--spares", "2", "--purpose", "ripeness", "--seed", "7",
         "--out", str(tmp_path / "cli"), "-q"],
    )  # fmt: skip
    assert result.exit_code == 0, result.output
    import geopandas as gpd

    # The browser's plan was changed afterwards (crews, a mark): compare the planned points kept in
    # plan.gpkg, and the summary written at save time, with the command's.
    planned = gpd.read_file(workspace / "harvest-2027" / "plan.gpkg", layer="points_planned")
    cli_points = gpd.read_file(tmp_path / "cli" / "plan.gpkg", layer="points")
    # reference: `fieldplan plan` with the same file, parameters and seed
    assert planned["point_id"].tolist() == cli_points["point_id"].tolist()
    assert planned["sample_id"].tolist() == cli_points["sample_id"].tolist()
    assert planned.geometry.geom_equals_exact(cli_points.geometry, tolerance=0).all()
    assert (workspace / "harvest-2027" / "summary.csv").read_bytes() == (
        tmp_path / "cli" / "summary.csv"
    ).read_bytes()
