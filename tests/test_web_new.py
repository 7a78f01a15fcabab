"""New plans over HTTP: uploads checked and refused safely, the CLI's choices, the CLI's points."""

from __future__ import annotations

import io
import json
import time
import zipfile
from pathlib import Path

import pytest

pytest.importorskip("fastapi")
from fastapi.testclient import TestClient  # noqa: E402
from typer.testing import CliRunner  # noqa: E402

from fieldplan.cli.main import app as cli  # noqa: E402
from fieldplan.demo import demo_blocks_path, demo_exclusions_path  # noqa: E402
from fieldplan.web.app import create_app  # noqa: E402

LOCAL = "http://127.0.0.1:8750"
POINT_FILES = ("points.csv", "points.geojson", "points.gpx", "points.kml", "summary.csv")


@pytest.fixture()
def client(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1800000000")
    ws = tmp_path / "ws"
    ws.mkdir()
    c = TestClient(create_app(ws, max_upload_mb=2), base_url=LOCAL)
    c.headers["X-CSRF-Token"] = c.get("/api/session").json()["csrf"]
    c.ws = ws
    return c


def _wait(client, job_id: str, timeout: float = 120.0) -> dict:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        job = client.get(f"/api/jobs/{job_id}").json()
        if job["status"] in ("done", "failed"):
            return job
        time.sleep(0.05)
    raise AssertionError("job did not finish")


def _upload(client, path: Path, name: str | None = None):
    return client.post("/api/uploads", files={"file": (name or path.name, path.read_bytes())})


def _listing(ws: Path) -> list[str]:
    return sorted(p.name for p in ws.iterdir() if p.name != ".fieldplan-web-secret")


def test_spec_form_offers_exactly_the_cli_choices(client):
    from fieldplan.spec import spec_schema

    schema = client.get("/api/spec").json()
    reference = {f["name"]: f for f in spec_schema()["fields"]}
    offered = {f["name"]: f for f in schema["fields"]}
    # reference: fieldplan.spec.spec_schema, the table the CLI's options are checked against
    for name, field in offered.items():
        assert field["choices"] == reference[name]["choices"], name
        assert field["default"] == reference[name]["default"], name
    assert set(reference) - set(offered) == set(schema["not_offered"])
    # No parameter naming a file on the server is offered.
    assert not [f for f in offered.values() if f["kind"] == "path"]
    assert [d["name"] for d in schema["designs"]] == [d["name"] for d in spec_schema()["designs"]]
    assert "wine-grapes" in schema["crop_profiles"]


def test_upload_shows_outline_table_and_checks(client):
    r = _upload(client, demo_blocks_path())
    assert r.status_code == 201, r.text
    info = r.json()
    assert info["features"] == 14 and info["check"]["ok"] and info["check"]["id_field"] == "block"
    assert len(info["outline"]["features"]) == 14 and "variety" in info["columns"]
    assert client.get(f"/api/uploads/{info['upload']}").json()["features"] == 14
    assert _listing(client.ws) == []  # an upload writes nothing into the workspace


def test_preview_then_save_equals_the_cli(client, tmp_path, monkeypatch):
    info = _upload(client, demo_blocks_path()).json()
    excl = _upload(client, demo_exclusions_path()).json()
    params = {"design": "random", "per_block": 3, "spares": 2, "purpose": "soil", "edge_buffer": 5}
    body = {"upload": info["upload"], "exclusions": excl["upload"], "params": params, "seed": 7}
    r = client.post("/api/previews", json=body)
    assert r.status_code == 202
    job = _wait(client, r.json()["job"])
    assert job["status"] == "done", job
    preview = job["result"]
    assert preview["points"] == 14 * 3 and preview["spares"] == 14 * 2
    assert preview["map"]["points"]["n"] == 14 * 3
    assert _listing(client.ws) == []  # a preview saves nothing
    r = client.post("/api/plans", json={**body, "name": "web"})
    job = _wait(client, r.json()["job"])
    assert job["status"] == "done" and job["result"]["url"] == "/plans/web"
    # The plan records the exclusions file by the name it was given: run the CLI beside it.
    monkeypatch.chdir(demo_exclusions_path().parent)
    result = CliRunner().invoke(
        cli,
        ["plan", str(demo_blocks_path()), "--exclude", demo_exclusions_path().name, "--design", "random",
         "--per-block", "3", "--spares", "2", "--purpose", "soil", "--edge-buffer", "5", "--seed", "7",
         "--out", str(tmp_path / "cli"), "-q"],
    )  # fmt: skip
    assert result.exit_code == 0, result.output
    for name in (*POINT_FILES, "cores.geojson"):
        # reference: `fieldplan plan` with the same file, parameters and seed
        assert (client.ws / "web" / name).read_bytes() == (tmp_path / "cli" / name).read_bytes(), name
    manifest = json.loads((client.ws / "web" / "manifest.json").read_text())
    assert manifest["input_file"] == "estate_blocks.geojson" and "fieldplan-upload" not in json.dumps(
        manifest
    )
    assert "fieldplan-upload" not in (client.ws / "web" / "README.txt").read_text()
    # The manifest's command is the CLI's, with the flags given above.
    assert manifest["command"] == (
        "fieldplan plan estate_blocks.geojson --design random --edge-buffer 5 --per-block 3 --purpose soil "
        "--spares 2 --exclude estate_exclusions.geojson --seed 7 --out PLAN_FOLDER"
    )


def test_multipart_plan_grid_equals_the_cli(client, tmp_path):
    params = {"spacing": 60, "layout": "triangular", "substitute": "within-cell"}
    r = client.post(
        "/api/plans?wait=true",
        files={"file": ("estate_blocks.geojson", demo_blocks_path().read_bytes())},
        data={"name": "grid-60", "params": json.dumps(params), "seed": "3"},
    )
    assert r.status_code == 201, r.text
    result = CliRunner().invoke(
        cli,
        ["plan", str(demo_blocks_path()), "--spacing", "60", "--layout", "triangular", "--substitute",
         "within-cell", "--seed", "3", "--out", str(tmp_path / "cli"), "-q"],
    )  # fmt: skip
    assert result.exit_code == 0, result.output
    for name in POINT_FILES:
        # reference: `fieldplan plan` with the same file, parameters and seed
        assert (client.ws / "grid-60" / name).read_bytes() == (tmp_path / "cli" / name).read_bytes(), name
    again = client.post(
        "/api/plans?wait=true",
        files={"file": ("estate_blocks.geojson", demo_blocks_path().read_bytes())},
        data={"name": "grid-60", "params": json.dumps(params)},
    )
    assert again.status_code == 409 and again.json()["parameter"] == "name"


@pytest.mark.parametrize(
    ("params", "parameter"),
    [
        ({"design": "random"}, "per_block"),
        ({"spacing": -3}, "spacing"),
        ({"spacing": 40, "per_ha": 2}, "per_ha"),
        ({"design": "nonsense", "spacing": 40}, "design"),
        ({"spacing": 40, "spares": 2}, "spares"),
        ({"spacing": 40, "exclude": "/etc/passwd"}, "exclude"),
        ({"spacing": 40, "cautions": "/etc/shadow"}, "cautions"),
        ({"purpose": "ripeness", "spacing": 40, "crop_profile": "/etc/hosts"}, "crop_profile"),
        ({"spacing": 40, "engine": "dask"}, "engine"),
        ({"spacing": 40, "bogus": 1}, "bogus"),
        ({"design": "random", "per_block": 2, "zones": "/etc/passwd"}, "zones"),
        ({"spacing": 40, "revisit": "../other"}, "revisit"),
        ({"design": "clhs", "covariates": "/etc/passwd"}, "covariates"),
    ],
)
def test_parameter_errors_name_the_parameter(client, params, parameter):
    info = _upload(client, demo_blocks_path()).json()
    r = client.post("/api/previews", json={"upload": info["upload"], "params": params})
    assert r.status_code == 400, r.text
    assert r.json()["parameter"] == parameter


def test_same_message_as_the_spec(client):
    from fieldplan.spec import PlanSpec, SpecError

    info = _upload(client, demo_blocks_path()).json()
    r = client.post("/api/previews", json={"upload": info["upload"], "params": {"design": "random"}})
    with pytest.raises(SpecError) as err:
        PlanSpec.from_dict({"design": "random"})
    # reference: the spec's own message, which the CLI words with flags
    assert r.json()["error"] == str(err.value)


def test_plan_names_checked_before_anything_is_written(client):
    info = _upload(client, demo_blocks_path()).json()
    for name in ("../escape", "..", ".hidden", "a/b", "", "x" * 80):
        r = client.post(
            "/api/plans", json={"upload": info["upload"], "params": {"spacing": 80}, "name": name}
        )
        assert r.status_code in (400, 422) and r.json()["parameter"] == "name", (name, r.text)
    assert _listing(client.ws) == []
    assert not (client.ws.parent / "escape").exists()


def test_oversized_upload_refused_nothing_written(client):
    big = b'{"type": "FeatureCollection", "features": []}' + b" " * 2_100_000
    r = client.post("/api/uploads", files={"file": ("big.geojson", big)})
    assert r.status_code == 413 and r.json()["parameter"] == "file"
    assert _listing(client.ws) == []


def _zip(members: dict[str, bytes], *, compression=zipfile.ZIP_DEFLATED) -> bytes:
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", compression=compression) as z:
        for name, data in members.items():
            z.writestr(name, data)
    return buf.getvalue()


def test_zip_bomb_refused(client, tmp_path):
    import tempfile

    before = set(Path(tempfile.gettempdir()).glob("fieldplan-upload-*"))
    # 25 MB of zeros packs into about 25 kB: more than ten times the 2 MB upload cap once unpacked.
    bomb = _zip({"blocks.shp": b"\0" * 25_000_000, "blocks.shx": b"\0", "blocks.dbf": b"\0"})
    assert len(bomb) < 2_000_000
    r = client.post("/api/uploads", files={"file": ("blocks.zip", bomb)})
    # reference: OWASP File Upload Cheat Sheet: limit the unpacked size of archives
    assert r.status_code == 413 and "unpacks" in r.json()["error"]
    assert _listing(client.ws) == []
    assert set(Path(tempfile.gettempdir()).glob("fieldplan-upload-*")) == before


@pytest.mark.parametrize(
    "member", ["../blocks.shp", "/etc/blocks.shp", "a/../../blocks.shp", "C:\\blocks.shp", "..\\x.shp"]
)
def test_zip_with_unsafe_names_refused(client, member):
    data = _zip({member: b"x", "blocks.shx": b"x", "blocks.dbf": b"x"})
    r = client.post("/api/uploads", files={"file": ("blocks.zip", data)})
    # reference: CWE-22 (Zip Slip): archive member names must stay inside the archive
    assert r.status_code == 422 and "unsafe" in r.json()["error"]
    assert _listing(client.ws) == [] and not (client.ws.parent / "blocks.shp").exists()


def test_zipped_shapefile_accepted(client, tmp_path):
    import geopandas as gpd

    frame = gpd.read_file(demo_blocks_path())
    shp = tmp_path / "shp"
    shp.mkdir()
    frame[["block", "variety", "geometry"]].to_file(shp / "estate.shp")
    data = _zip({p.name: p.read_bytes() for p in shp.iterdir()})
    r = client.post("/api/uploads", files={"file": ("estate.zip", data)})
    assert r.status_code == 201, r.text
    assert r.json()["check"]["blocks"] == 14


def test_kml_upload_read_as_blocks(client, tmp_path):
    import geopandas as gpd

    frame = gpd.read_file(demo_blocks_path())[["block", "geometry"]].rename(columns={"block": "Name"})
    path = tmp_path / "estate.kml"
    frame.to_file(path, driver="KML")
    r = _upload(client, path)
    assert r.status_code == 201, r.text
    info = r.json()
    assert info["check"]["ok"] and info["check"]["blocks"] == 14
    # reference: OGC KML 2.2: the placemark <name> becomes the block id
    assert {row["block"] for row in info["rows"]} == set(gpd.read_file(demo_blocks_path())["block"])


def test_other_file_types_refused(client):
    for name, data, status in (
        ("x.exe", b"MZ\0\0", 415),
        ("x.geojson", b"", 422),
        ("x.geojson", b"not json", 422),
    ):
        r = client.post("/api/uploads", files={"file": (name, data)})
        assert r.status_code == status, (name, r.text)
        assert r.json()["parameter"] == "file"


def test_column_roles_map_differently_named_columns(client, tmp_path):
    import geopandas as gpd

    frame = gpd.read_file(demo_blocks_path()).rename(columns={"block": "Code", "variety": "Cultivar"})
    path = tmp_path / "renamed.geojson"
    frame[["Code", "Cultivar", "geometry"]].to_file(path, driver="GeoJSON")
    info = _upload(client, path).json()
    params = {"spacing": 80, "id_field": "Code", "columns": {"variety": "Cultivar"}}
    r = client.post("/api/previews", json={"upload": info["upload"], "params": params, "seed": 1})
    job = _wait(client, r.json()["job"])
    assert job["status"] == "done", job
    labels = {
        f["properties"]["block"]: f["properties"].get("variety")
        for f in job["result"]["map"]["block_labels"]["features"]
    }
    original = gpd.read_file(demo_blocks_path()).set_index("block")["variety"].to_dict()
    # reference: the demo file's own block/variety pairs, read through the mapped columns
    assert labels == original


def test_size_calculator_matches_the_formula(client):
    from scipy import stats

    r = client.get("/api/size", params={"cv": 25, "margin": 10})
    assert r.status_code == 200
    body = r.json()
    # reference: Cochran 1977, eq. 4.2 with t on n-1 degrees of freedom: n = (t * CV / e)^2
    t = stats.t.ppf(0.975, body["n"] - 1)
    assert body["n"] == int(-(-((t * 25 / 10) ** 2) // 1))
    assert "CV" in body["formula"]
    assert client.get("/api/size", params={"cv": 25}).json()["parameter"] == "margin"
    assert client.get("/api/size").status_code == 422


def test_long_plan_reports_progress_and_does_not_block(client, tmp_path):
    from benchmarks.workloads import estate, write_geojson

    path = write_geojson(estate(600, seed=9), tmp_path / "estate_600.geojson")
    info = _upload(client, path).json()
    r = client.post("/api/previews", json={"upload": info["upload"], "params": {"spacing": 60}, "seed": 2})
    job_id = r.json()["job"]
    quick, seen_total = [], 0
    while True:
        t0 = time.perf_counter()
        assert client.get("/api/plans").status_code == 200
        quick.append(time.perf_counter() - t0)
        job = client.get(f"/api/jobs/{job_id}").json()
        seen_total = max(seen_total, job["total"])
        if job["status"] in ("done", "failed"):
            break
        time.sleep(0.02)
    assert job["status"] == "done", job
    assert job["done"] == job["total"] == seen_total > 0  # progress counted the blocks planned
    # Other requests were answered while the plan ran (the plan ran in the pool, not in the request).
    assert len(quick) >= 3
    assert max(quick) < job["seconds"]


def test_killed_server_leaves_plan_folders_whole(tmp_path):
    """SIGKILL while a large plan is being made: no half plan folder, the others untouched."""
    import hashlib
    import os
    import signal
    import socket
    import subprocess
    import sys

    import httpx

    from benchmarks.workloads import estate, write_geojson
    from fieldplan.store import load_plan
    from fieldplan.web.workspace import list_plans

    ws = tmp_path / "ws"
    ws.mkdir()
    result = CliRunner().invoke(
        cli, ["plan", str(demo_blocks_path()), "--spacing", "80", "--out", str(ws / "kept"), "-q"]
    )
    assert result.exit_code == 0, result.output
    before = {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in (ws / "kept").iterdir()}
    big = write_geojson(estate(800, seed=3), tmp_path / "estate_800.geojson")
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[1])}

    def start():
        with socket.socket() as s:
            s.bind(("127.0.0.1", 0))
            port = s.getsockname()[1]
        proc = subprocess.Popen(
            [sys.executable, "-m", "fieldplan", "serve", str(ws), "--port", str(port)],
            env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
        )  # fmt: skip
        base = f"http://127.0.0.1:{port}"
        end = time.monotonic() + 90
        while proc.poll() is None and time.monotonic() < end:
            try:
                httpx.get(base + "/api/session", timeout=1.0)
                return proc, base
            except httpx.HTTPError:
                time.sleep(0.1)
        proc.kill()
        proc.wait(timeout=10)
        return None, None  # the port was taken meanwhile, or the start was too slow: try again

    for _ in range(3):
        proc, base = start()
        if proc is not None:
            break
    assert proc is not None, "server did not start"
    try:
        with httpx.Client(base_url=base, timeout=60.0) as c:
            c.headers["X-CSRF-Token"] = c.get("/api/session").json()["csrf"]
            upload = c.post("/api/uploads", files={"file": (big.name, big.read_bytes())}).json()["upload"]
            job = c.post(
                "/api/plans", json={"upload": upload, "params": {"spacing": 40}, "name": "big"}
            ).json()["job"]
            while True:
                state = c.get(f"/api/jobs/{job}").json()
                if (
                    state["total"]
                    and state["done"] >= state["total"] // 2
                    or state["status"] in ("done", "failed")
                ):
                    break
                time.sleep(0.01)
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=10)
        assert state["status"] == "running"  # killed in the middle of the plan
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=10)
    # common practice, no source: an interrupted write leaves the old state or the new, never half
    names = [p["name"] for p in list_plans(ws)]
    assert "kept" in names
    if (ws / "big").exists():
        assert load_plan(ws / "big").points is not None
    after = {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in (ws / "kept").iterdir()}
    assert after == before
    # The workspace serves again and can make the plan that was cut off.
    client = TestClient(create_app(ws), base_url=LOCAL)
    assert client.get("/api/plans").status_code == 200
