"""The crew page in headless Chromium: a day with no signal, then one sync that stores each record once.

The server runs on 127.0.0.1 (uvicorn in a thread); every request to any other
address is refused and logged. Run ``python tests/test_crew_page.py`` to refresh
docs/crew_page.png.
"""

from __future__ import annotations

import hashlib
import json
import socket
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest

from tests.test_browser import ARGS, CHROMIUM

pytestmark = pytest.mark.browser

BLOCKS = {
    "type": "FeatureCollection",
    "features": [
        {
            "type": "Feature",
            "properties": {"block": name},
            "geometry": {
                "type": "Polygon",
                "coordinates": [
                    [
                        [x0, -33.930],
                        [x0 + 0.004, -33.930],
                        [x0 + 0.004, -33.927],
                        [x0, -33.927],
                        [x0, -33.930],
                    ]
                ],
            },
        }
        for name, x0 in (("Ridge", 18.860), ("Creek", 18.865))
    ],
}


def make_workspace(root: Path) -> Path:
    """A workspace with one ripeness plan (spares) and two crews, made through the CLI."""
    from typer.testing import CliRunner

    from fieldplan.cli.main import app

    root.mkdir(parents=True, exist_ok=True)
    blocks = root.parent / "blocks.geojson"
    blocks.write_text(json.dumps(BLOCKS))
    runner = CliRunner()
    plan = root / "vintage"
    for args in (
        ["plan", str(blocks), "--design", "random", "--per-block", "6", "--spares", "2",
         "--purpose", "ripeness", "--seed", "11", "--formats", "core", "--out", str(plan), "-q"],
        ["crews", str(plan), "--crews", "2", "-q"],
    ):  # fmt: skip
        result = runner.invoke(app, args)
        assert result.exit_code == 0, result.output
    return root


class Server:
    """uvicorn on 127.0.0.1 in a thread; stop() and start() again on the same port (same origin)."""

    def __init__(self, app) -> None:
        self.app = app
        with socket.socket() as s:
            s.bind(("127.0.0.1", 0))
            self.port = s.getsockname()[1]
        self.url = f"http://127.0.0.1:{self.port}"
        self.server = None

    def start(self) -> None:
        import uvicorn

        config = uvicorn.Config(
            self.app, host="127.0.0.1", port=self.port, log_level="warning", lifespan="off"
        )
        self.server = uvicorn.Server(config)
        self.thread = threading.Thread(target=self.server.run, daemon=True)
        self.thread.start()
        deadline = time.monotonic() + 10
        while not self.server.started and time.monotonic() < deadline:
            time.sleep(0.02)
        assert self.server.started

    def stop(self) -> None:
        self.server.should_exit = True
        self.thread.join(timeout=10)


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    if not CHROMIUM.exists():
        pytest.skip("needs Debian's chromium at /usr/bin/chromium (apt-get install -y chromium)")
    from fieldplan.web.app import create_app

    workspace = make_workspace(tmp_path_factory.mktemp("crewpage") / "workspace")
    app = create_app(workspace)
    server = Server(app)
    server.start()
    yield server, app, workspace / "vintage"
    server.stop()


def open_context(pw, profile: Path, origin: str, *, size=(412, 860)):
    """A Chromium profile like a phone's: geolocation allowed, every non-local request refused."""
    log = {"blocked": [], "errors": []}
    context = pw.chromium.launch_persistent_context(
        str(profile),
        executable_path=str(CHROMIUM),
        headless=True,
        args=ARGS,
        viewport={"width": size[0], "height": size[1]},
        device_scale_factor=1,
        is_mobile=True,
        has_touch=True,
        permissions=["geolocation"],
        geolocation={"latitude": -33.9285, "longitude": 18.862, "accuracy": 4},
        service_workers="allow",
    )

    def route(r):
        if r.request.url.startswith(origin + "/") or r.request.url.startswith("blob:"):
            r.continue_()
        else:
            log["blocked"].append(r.request.url)
            r.abort()

    context.route("**/*", route)
    return context, log


def crew_link(app, plan: str, crew: int, base: str) -> str:
    from fieldplan.field.links import crew_link as link

    return link(base, app.state.secret, plan, crew)


def wait_until(page, expression: str, timeout: float = 15.0) -> None:
    """Poll ``expression`` in the page (the page's CSP forbids wait_for_function's eval)."""
    deadline = time.monotonic() + timeout
    while True:
        try:
            if page.evaluate(expression):
                return
        except Exception:  # noqa: BLE001 - the page may be navigating
            pass
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out waiting for {expression}")
        time.sleep(0.05)


def _wait_ready(page) -> None:
    wait_until(page, "!!(window.fieldplanCrew && window.fieldplanCrew.state.data)", 20)


def _layers(plan_dir: Path):
    from fieldplan.store import load_plan

    return load_plan(plan_dir).layers


def test_offline_day_then_one_sync(served, tmp_path):
    from playwright.sync_api import sync_playwright

    from fieldplan.field.sync import journal_records, read_journal
    from fieldplan.write.gpkg import GPKG_NAME

    server, app, plan_dir = served
    link = crew_link(app, "vintage", 1, server.url)
    with sync_playwright() as pw:
        context, log = open_context(pw, tmp_path / "phone", server.url)
        page = context.new_page()
        page.on("console", lambda m: log["errors"].append(m.text) if m.type == "error" else None)
        page.on("pageerror", lambda e: log["errors"].append(str(e)))
        page.goto(link)
        _wait_ready(page)
        wait_until(page, "navigator.serviceWorker.controller !== null", 20)
        assert page.locator("#cautions").is_visible()  # field cautions first
        assert "re-entry" in page.locator("#caution-list").inner_text()
        page.click("#btn-cautions-close")
        data = page.evaluate("window.fieldplanCrew.state.data")
        points = data["points"]
        assert len(points) >= 6

        # No signal from here on: the server is gone as well, so nothing can sneak through.
        context.set_offline(True)
        server.stop()
        taken = []
        for k, point in enumerate(points[:5]):
            # ~3 m north of the planned spot, as a phone standing by the vine would read.
            context.set_geolocation(
                {"latitude": point["lat"] + 2.7e-5, "longitude": point["lon"], "accuracy": 4}
            )
            wait_until(
                page, f"document.getElementById('next-id').textContent.includes('{point['point_id']}')"
            )
            wait_until(page, "document.getElementById('distance').dataset.metres < 5")
            page.click("#btn-taken")
            if k == 0:
                # Another point's bag: refused on the spot, nothing stored.
                page.fill("#sample-id", points[5]["sample_id"])
                page.click("#btn-save-taken")
                assert "Wrong bag" in page.locator("#taken-problem").inner_text()
                page.fill(
                    "#sample-id", point["sample_id"][:-1] + ("2" if point["sample_id"][-1] != "2" else "3")
                )
                page.click("#btn-save-taken")
                assert "Check character" in page.locator("#taken-problem").inner_text()
            page.fill("#sample-id", point["sample_id"].lower())
            page.fill("#value", f"{21 + k / 2:.1f}")
            page.fill("#note", f"row end {k}")
            page.click("#btn-save-taken")
            wait_until(page, f"document.getElementById('unsynced-count').textContent === '{k + 1}'")
            taken.append(point["point_id"])
        unreachable = points[5]
        context.set_geolocation(
            {"latitude": unreachable["lat"] - 3e-4, "longitude": unreachable["lon"], "accuracy": 6}
        )
        page.click("#btn-unreachable")
        page.select_option("#reason", "standing water or mud")
        page.fill("#reason-text", "dam overflowed")
        page.click("#btn-save-unreachable")
        page.wait_for_selector("#offer:not([hidden])")
        offer = unreachable["offer"]
        if offer and offer["replacement_id"]:
            assert offer["replacement_id"] in page.locator("#offer-text").inner_text()
        if offer and offer["replacement_id"]:
            page.click("#btn-offer-go")  # the spare becomes the next point, with its own bag
            wait_until(
                page, f"document.getElementById('next-id').textContent.includes({offer['replacement_id']!r})"
            )
            assert offer["sample_id"] in page.locator("#next-where").inner_text()
        else:
            page.click("#btn-offer-close")
        assert page.locator("#unsynced-count").inner_text() == "6"
        # No server all day: Export saves the records to a file (applied below, after the sync).
        with page.expect_download() as saved:
            page.click("#btn-export")
        export = tmp_path / saved.value.suggested_filename
        saved.value.save_as(export)
        assert export.name == "fieldplan-vintage-crew1-records.json"

        # Reload with no signal: the worker serves the page, IndexedDB still has every record.
        page.reload()
        _wait_ready(page)
        wait_until(page, "document.getElementById('unsynced-count').textContent === '6'")
        assert "Offline" in page.locator("#sync-state").inner_text()
        assert not (plan_dir / "field_records.jsonl").exists()

        # The browser closed and started again (a restarted phone), still with no signal.
        context.close()
        context, log = open_context(pw, tmp_path / "phone", server.url)
        context.set_offline(True)
        page = context.new_page()
        page.on("pageerror", lambda e: log["errors"].append(str(e)))
        page.goto(link)
        _wait_ready(page)
        wait_until(page, "document.getElementById('unsynced-count').textContent === '6'")
        assert page.locator("#cautions").is_hidden()  # read once, remembered on the phone

        # Signal again: the page syncs by itself on the 'online' event.
        server.start()
        context.set_offline(False)
        wait_until(page, "document.getElementById('unsynced-count').textContent === '0'", 30)
        records = page.evaluate("window.fieldplanCrew.state.records")
        assert len(records) == 6 and all(r["synced"] and not r.get("problem") for r in records)

        layers = _layers(plan_dir)
        results = layers["results"]
        assert sorted(results["point_id"]) == sorted(taken)
        assert sorted(np.round(results["value"].astype(float), 1)) == [21.0, 21.5, 22.0, 22.5, 23.0]
        assert set(results["variable"]) == {"brix"} and results["round"].nunique() == 1
        actual = layers["actual"]
        assert sorted(actual["point_id"]) == sorted(taken)
        # reference: pyproj.Geod: 2.7e-5 degrees of latitude is about 3.0 m at 34 degrees S
        assert np.allclose(actual["offset_m"].astype(float), 2.99, atol=0.05)
        events = layers["events"]
        assert list(events["action"]) == ["inaccessible"] and list(events["point_id"]) == [
            unreachable["point_id"]
        ]
        mine = {r["id"] for r in records if r["kind"] == "unreachable"}
        assert any(f"[record {rid}]" in events["reason"].iloc[0] for rid in mine)
        if offer and offer["replacement_id"]:
            assert (
                events["replacement_id"].iloc[0] == offer["replacement_id"]
            )  # the page offered mark's choice
        assert len(journal_records(read_journal(plan_dir))) == 6

        # The same records sent again (a lost answer, a retry): nothing is added, the file is untouched.
        wait_until(page, "!window.fieldplanCrew.state.syncing")
        if offer and offer["replacement_id"]:
            # After the sync the page reloads the plan: the spare now sits on the crew's list.
            ids_now = page.evaluate("window.fieldplanCrew.state.data.points.map((p) => p.point_id)")
            assert offer["replacement_id"] in ids_now
        before = hashlib.sha256((plan_dir / GPKG_NAME).read_bytes()).hexdigest()
        again = page.evaluate(
            """async () => {
                 const c = window.fieldplanCrew, recs = c.state.records;
                 recs.forEach((r) => { r.synced = false; });
                 await c.sync(true);
                 return recs.map((r) => r.synced);
               }"""
        )
        assert all(again)
        assert hashlib.sha256((plan_dir / GPKG_NAME).read_bytes()).hexdigest() == before
        assert len(journal_records(read_journal(plan_dir))) == 6

        # The exported file holds the same records: applied with the CLI it adds nothing either.
        from typer.testing import CliRunner

        from fieldplan.cli.main import app as cli

        applied = CliRunner().invoke(cli, ["field-records", str(plan_dir), str(export)])
        assert applied.exit_code == 0, applied.output
        assert "0 new record(s), 6 already stored" in applied.output
        assert hashlib.sha256((plan_dir / GPKG_NAME).read_bytes()).hexdigest() == before

        # The plan page shows the same records: one round, five recorded positions, one point given up.
        office = context.new_page()
        office.goto(server.url + "/plans/vintage")
        wait_until(office, "document.querySelectorAll('.fp-actual').length > 0", 20)
        assert office.locator(".fp-actual").count() == 5
        detail = office.evaluate("fetch('/api/plans/vintage').then((r) => r.json())")
        assert detail["rounds"] == 1 and detail["status_counts"].get("inaccessible") == 1
        assert detail["conflicts"] == []
        office.close()

        # The worker keeps only same-origin files.
        kept = page.evaluate(
            """async () => {
                 const out = [];
                 for (const name of await caches.keys()) {
                   const cache = await caches.open(name);
                   for (const req of await cache.keys()) out.push(req.url);
                 }
                 return out;
               }"""
        )
        assert kept and all(u.startswith(server.url + "/") for u in kept)
        assert any("/field/static/leaflet/leaflet.js" in u for u in kept)
        assert any("/api/field/vintage/1/data" in u for u in kept)
        # The worker's own filter (other origins cannot even be asked for: the page's CSP
        # allows 'self' only, so this checks the worker on its own).
        workers = context.service_workers
        assert len(workers) == 1
        assert workers[0].evaluate("sameOrigin('https://tiles.example.org/1/2/3.png')") is False
        assert workers[0].evaluate("sameOrigin(self.location.origin + '/field/static/crew.js')") is True
        assert log["blocked"] == []
        assert log["errors"] == [] or all("Failed to load resource" in e for e in log["errors"])
        context.close()


def test_js_checks_agree_with_python(served, tmp_path):
    """The page's id check and geodesic match fieldplan.samples.ids and pyproj.Geod."""
    from playwright.sync_api import sync_playwright
    from pyproj import Geod

    from fieldplan.field.sync import check_sample_id
    from fieldplan.samples.ids import (
        ALPHABET,
        check_char,
        is_valid,
        make_sample_ids,
        normalise_id,
        round_sample_ids,
    )

    server, _, _ = served
    rng = np.random.default_rng(20)
    payloads = ["".join(rng.choice(list(ALPHABET), size=int(n))) for n in rng.integers(1, 12, size=300)]
    ids = list(make_sample_ids(200, code="K7QM"))
    typos = [i[:-1] + ALPHABET[(ALPHABET.index(i[-1]) + 1) % 31] for i in ids[:50]]
    # Adjacent transpositions of different characters (swapping equal ones changes nothing).
    swaps = [i[:6] + i[7] + i[6] + i[8:] for i in ids[:200] if i[6] != i[7]][:50]
    # The page's bag check against the server's (week-2 labels of the same point are its bags).
    week2 = round_sample_ids(ids[:2], 2)
    labels = [normalise_id(week2[0])]
    bags = [[t, ids[0], labels] for t in (ids[0], ids[0].lower(), week2[0], week2[1], ids[1], typos[0], "")]
    lat1 = rng.uniform(-60, 60, 200)
    lon1 = rng.uniform(-180, 180, 200)
    lat2 = lat1 + rng.uniform(-0.02, 0.02, 200)
    lon2 = lon1 + rng.uniform(-0.02, 0.02, 200)
    with sync_playwright() as pw:
        context, _ = open_context(pw, tmp_path / "phone", server.url)
        page = context.new_page()
        page.goto(server.url + "/field/static/crew.css")
        page.add_script_tag(url=server.url + "/field/static/fieldcore.js")
        got = page.evaluate(
            """([payloads, ids, bad, pts, bags]) => ({
                 checks: payloads.map((p) => FieldCore.checkChar(p)),
                 valid: ids.concat(bad).map((i) => FieldCore.isValidId(i)),
                 geo: pts.map((p) => FieldCore.inverse(p[0], p[1], p[2], p[3])),
                 bags: bags.map((b) => FieldCore.bagProblem(b[0], b[1], b[2])),
               })""",
            [payloads, ids, typos + swaps, np.column_stack([lat1, lon1, lat2, lon2]).tolist(), bags],
        )
        context.close()
    # reference: fieldplan.samples.ids (ISO/IEC 7064 pure system, mod 31, radix 3)
    assert got["checks"] == [check_char(p) for p in payloads]
    assert got["valid"] == [is_valid(i) for i in ids + typos + swaps]
    assert all(got["valid"][:200]) and not any(got["valid"][200:])
    assert [p == "" for p in got["bags"]] == [check_sample_id(*b) == "" for b in bags]
    assert [p == "" for p in got["bags"]] == [True, True, True, False, False, False, False]
    # reference: pyproj.Geod (Karney 2013) on WGS84: within 0.5 m and 0.5 degrees
    az, _, dist = Geod(ellps="WGS84").inv(lon1, lat1, lon2, lat2)
    js_dist = np.array([g["distance"] for g in got["geo"]])
    js_az = np.array([g["azimuth"] for g in got["geo"]])
    assert np.abs(js_dist - dist).max() < 0.5
    turn = (js_az - np.mod(az, 360) + 180) % 360 - 180
    assert np.abs(turn).max() < 0.5


def test_page_distance_and_bearing_match_pyproj(served, tmp_path):
    """What the page shows for the next point, against pyproj.Geod from the same position."""
    from playwright.sync_api import sync_playwright
    from pyproj import Geod

    server, app, _ = served
    with sync_playwright() as pw:
        context, log = open_context(pw, tmp_path / "phone", server.url)
        page = context.new_page()
        page.goto(crew_link(app, "vintage", 2, server.url))
        _wait_ready(page)
        first = page.evaluate("window.fieldplanCrew.state.data.points[0]")
        here = (first["lat"] - 0.0009, first["lon"] + 0.0012)
        context.set_geolocation({"latitude": here[0], "longitude": here[1], "accuracy": 7})
        wait_until(
            page,
            f"window.fieldplanCrew.state.fix && window.fieldplanCrew.state.fix.coords.latitude === {here[0]!r}",
        )
        page.wait_for_timeout(100)
        shown_m = float(page.locator("#distance").get_attribute("data-metres"))
        shown_deg = float(page.locator("#bearing").get_attribute("data-degrees"))
        assert "±7 m" in page.locator("#accuracy").inner_text()
        # Recording this far from the spot: the page warns with the distance and the plan's limit first.
        page.click("#btn-cautions-close")
        page.click("#btn-taken")
        page.fill("#sample-id", first["sample_id"])
        page.click("#btn-save-taken")
        warning = page.locator("#offset-warning")
        warning.wait_for(state="visible")
        assert f"{round(shown_m)} m from the planned spot (limit 10" in warning.inner_text()
        assert page.locator("#btn-save-taken").inner_text() == "Save anyway"
        assert page.locator("#unsynced-count").inner_text() == "0"  # nothing kept yet
        page.click("#btn-cancel-taken")
        context.close()
    az, _, dist = Geod(ellps="WGS84").inv(here[1], here[0], first["lon"], first["lat"])
    # reference: pyproj.Geod, within 0.5 m / 0.5 degrees
    assert abs(shown_m - dist) < 0.5
    assert abs((shown_deg - az % 360 + 180) % 360 - 180) < 0.5
    assert log["blocked"] == []


def save_screenshot(out: Path) -> Path:
    """The crew page on a phone-sized screen (docs/crew_page.png)."""
    import tempfile

    from playwright.sync_api import sync_playwright

    from fieldplan.web.app import create_app

    with tempfile.TemporaryDirectory() as tmp:
        workspace = make_workspace(Path(tmp) / "workspace")
        app = create_app(workspace)
        server = Server(app)
        server.start()
        try:
            with sync_playwright() as pw:
                context, _ = open_context(pw, Path(tmp) / "phone", server.url, size=(390, 844))
                page = context.new_page()
                page.goto(crew_link(app, "vintage", 1, server.url))
                _wait_ready(page)
                page.click("#btn-cautions-close")
                first = page.evaluate("window.fieldplanCrew.state.data.points[0]")
                context.set_geolocation(
                    {"latitude": first["lat"] - 0.0004, "longitude": first["lon"] - 0.0003, "accuracy": 5}
                )
                wait_until(page, "document.getElementById('distance').dataset.metres !== undefined")
                page.wait_for_timeout(400)
                page.screenshot(path=str(out))
                context.close()
        finally:
            server.stop()
    return out


if __name__ == "__main__":
    target = Path(sys.argv[1]) if len(sys.argv) > 1 else Path(__file__).parents[1] / "docs" / "crew_page.png"
    print(save_screenshot(target))


def test_crew_sheet_carries_the_crew_link_as_a_qr_code(tmp_path):
    """`fieldplan crews --link-base` prints each crew's link on its sheet; the QR code decodes to it."""
    import io

    import zxingcpp
    from PIL import Image
    from playwright.sync_api import sync_playwright
    from typer.testing import CliRunner

    from fieldplan.cli.main import app as cli
    from fieldplan.field.links import check_crew_token, workspace_secret

    if not CHROMIUM.exists():
        pytest.skip("needs Debian's chromium at /usr/bin/chromium")
    workspace = make_workspace(tmp_path / "workspace")
    plan = workspace / "vintage"
    base = "http://192.168.7.20:8750"
    result = CliRunner().invoke(
        cli, ["crews", str(plan), "--crews", "2", "--force", "--link-base", base, "-q"]
    )
    assert result.exit_code == 0, result.output
    sheet = plan / "crew_sheets.html"
    secret = workspace_secret(workspace)
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=str(CHROMIUM), headless=True, args=ARGS)
        page = browser.new_page(viewport={"width": 900, "height": 1200})
        page.route("**/*", lambda r: r.continue_() if r.request.url.startswith("file://") else r.abort())
        page.goto(sheet.resolve().as_uri())
        found = []
        for k, code in enumerate(page.locator("div.link svg").all(), start=1):
            image = Image.open(io.BytesIO(code.screenshot())).convert("L")
            # reference: zxing-cpp decodes the QR code as a phone camera app would
            texts = [b.text for b in zxingcpp.read_barcodes(image)]
            assert len(texts) == 1
            found.append(texts[0])
            assert f"/field/vintage/{k}/?t=" in texts[0] and texts[0].startswith(base)
            token = texts[0].rsplit("?t=", 1)[1]
            assert check_crew_token(secret, "vintage", k, token)
            assert not check_crew_token(secret, "vintage", 3 - k, token)
        browser.close()
    assert len(found) == 2


def test_scanning_the_bag_label_fills_the_id(served, tmp_path):
    """Where the browser has a barcode detector, Scan reads the bag's QR code into the id field.

    Headless Chromium on Linux has no detector, so a stand-in returns the label a camera would
    read; the fake camera of Chromium supplies the video. What is checked is the page's part:
    the camera opens, the code read fills the field, the id check then applies.
    """
    from playwright.sync_api import sync_playwright

    server, app, _ = served
    with sync_playwright() as pw:
        context = pw.chromium.launch_persistent_context(
            str(tmp_path / "phone"),
            executable_path=str(CHROMIUM),
            headless=True,
            args=[*ARGS, "--use-fake-device-for-media-stream", "--use-fake-ui-for-media-stream"],
            viewport={"width": 412, "height": 860},
            permissions=["geolocation", "camera"],
            geolocation={"latitude": -33.9285, "longitude": 18.862, "accuracy": 4},
        )
        blocked = []
        context.route(
            "**/*",
            lambda r: (
                r.continue_()
                if r.request.url.startswith(server.url + "/")
                else (blocked.append(r.request.url), r.abort())
            ),
        )
        context.add_init_script(
            """window.BarcodeDetector = class {
                 constructor(options) { this.formats = options.formats; }
                 async detect(video) {
                   return video.readyState >= 2 && window.__label ? [{ rawValue: window.__label }] : [];
                 }
               };"""
        )
        page = context.new_page()
        page.goto(crew_link(app, "vintage", 2, server.url))
        _wait_ready(page)
        page.click("#btn-cautions-close")
        target = page.evaluate("window.fieldplanCrew.state.target")
        page.click("#btn-taken")
        assert page.locator("#btn-scan").is_visible()
        page.evaluate(f"window.__label = {target['sample_id']!r}")
        page.click("#btn-scan")
        wait_until(page, f"document.getElementById('sample-id').value === {target['sample_id']!r}")
        assert page.locator("#scan-video").is_hidden()  # camera closed after the read
        context.close()
    assert blocked == []
