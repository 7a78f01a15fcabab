"""The web workspace over HTTP (FastAPI's TestClient): access, CSRF, headers, plan names, uploads."""

from __future__ import annotations

import sys
import types
from pathlib import Path

import pytest

pytest.importorskip("fastapi")
from fastapi.testclient import TestClient  # noqa: E402

from fieldplan.web.app import create_app  # noqa: E402

LOCAL = "http://127.0.0.1:8750"
TOKEN = "a-long-enough-test-token-0123456789"


@pytest.fixture()
def workspace(tmp_path) -> Path:
    ws = tmp_path / "ws"
    ws.mkdir()
    return ws


@pytest.fixture()
def client(workspace) -> TestClient:
    return TestClient(create_app(workspace), base_url=LOCAL)


def _csrf(client: TestClient) -> dict:
    return {"X-CSRF-Token": client.get("/api/session").json()["csrf"]}


def test_home_serves_with_security_headers(client):
    r = client.get("/")
    assert r.status_code == 200
    csp = r.headers["content-security-policy"]
    # reference: CSP Level 3 (W3C): no external origin, no inline script
    assert "script-src 'self'" in csp and "unsafe-inline" not in csp and "http" not in csp
    assert r.headers["x-content-type-options"] == "nosniff"
    assert r.headers["x-frame-options"] == "DENY"


def test_loopback_only_host_names_when_not_public(workspace):
    # reference: OWASP DNS rebinding guidance: a local service checks the Host header
    client = TestClient(create_app(workspace), base_url="http://attacker.example")
    assert client.get("/").status_code == 421
    for host in ("http://localhost:8750", "http://[::1]:8750", LOCAL):
        assert TestClient(create_app(workspace), base_url=host).get("/api/plans").status_code == 200


def test_public_without_token_answers_401(workspace):
    app = create_app(workspace, token=TOKEN, public=True)
    client = TestClient(app, base_url="http://192.0.2.10:8750")
    # reference: RFC 6750 section 3: a missing bearer token is 401 with WWW-Authenticate
    r = client.get("/api/plans")
    assert r.status_code == 401 and r.headers["www-authenticate"].startswith("Bearer")
    assert r.json()["status"] == 401
    assert client.get("/").status_code == 401
    assert client.get("/static/workspace.css").status_code == 401
    assert client.get("/api/plans", headers={"Authorization": "Bearer wrong"}).status_code == 401


def test_public_generates_a_token_when_none_given(workspace):
    app = create_app(workspace, public=True)
    assert isinstance(app.state.token, str) and len(app.state.token) >= 32
    client = TestClient(app, base_url="http://192.0.2.10:8750")
    assert client.get("/api/plans").status_code == 401
    ok = client.get("/api/plans", headers={"Authorization": f"Bearer {app.state.token}"})
    assert ok.status_code == 200


def test_token_link_becomes_a_cookie(workspace):
    app = create_app(workspace, token=TOKEN, public=True)
    client = TestClient(app, base_url="http://192.0.2.10:8750")
    r = client.get(f"/?token={TOKEN}", follow_redirects=False)
    assert r.status_code == 303 and r.headers["location"] == "/"
    cookies = " ".join(r.headers.get_list("set-cookie"))
    assert "fp_auth=" in cookies and TOKEN not in cookies and "HttpOnly" in cookies
    # The cookie now opens every page and the API.
    assert client.get("/").status_code == 200
    assert client.get("/api/plans").status_code == 200


def test_csrf_required_on_changes(client):
    # reference: OWASP CSRF Prevention Cheat Sheet (synchroniser token in a custom header)
    r = client.post("/api/plans/x/marks", json={})
    assert r.status_code == 403 and r.json()["parameter"] == "X-CSRF-Token"
    headers = _csrf(client)
    r = client.post("/api/plans/x/marks", json={}, headers={"X-CSRF-Token": "0" * 40})
    assert r.status_code == 403
    # With the session's token the request reaches the route (which then finds no plan).
    r = client.post("/api/plans/x/marks", json={"point_ids": ["a"], "reason": "r"}, headers=headers)
    assert r.status_code == 404


def test_cross_origin_post_refused_even_with_token(client):
    headers = {**_csrf(client), "Origin": "http://attacker.example"}
    r = client.post("/api/plans/x/marks", json={}, headers=headers)
    assert r.status_code == 403 and "Origin" in r.json()["error"]


def test_bearer_requests_need_no_csrf(workspace):
    app = create_app(workspace, token=TOKEN, public=True)
    client = TestClient(app, base_url="http://192.0.2.10:8750")
    r = client.post(
        "/api/plans/x/marks",
        json={"point_ids": ["a"], "reason": "r"},
        headers={"Authorization": f"Bearer {TOKEN}"},
    )
    assert r.status_code == 404  # past the guard, no such plan


@pytest.mark.parametrize("name", ["..", "../etc", ".hidden", "a/b", "a\\b", "x" * 65, "-lead", "a..b"])
def test_plan_names_never_become_paths(client, workspace, name):
    from fieldplan.web.workspace import WebError, plan_dir

    with pytest.raises(WebError) as err:
        plan_dir(workspace, name)
    assert err.value.status == 400 and err.value.parameter == "name"


def test_symlinked_plan_folder_refused(workspace, tmp_path):
    from fieldplan.web.workspace import WebError, plan_dir

    outside = tmp_path / "outside"
    outside.mkdir()
    (workspace / "linked").symlink_to(outside, target_is_directory=True)
    with pytest.raises(WebError):
        plan_dir(workspace, "linked")


def test_unknown_plan_is_json_404_naming_the_parameter(client):
    r = client.get("/api/plans/nothing-here")
    assert r.status_code == 404
    body = r.json()
    assert body["parameter"] == "name" and "nothing-here" in body["error"]


def test_oversized_body_refused_before_parsing(workspace):
    app = create_app(workspace, max_upload_mb=0.01)
    client = TestClient(app, base_url=LOCAL)
    r = client.post("/api/uploads", files={"file": ("b.geojson", b"x" * 20_000)}, headers=_csrf(client))
    assert r.status_code == 413 and r.json()["parameter"] == "file"
    assert list(workspace.iterdir()) == [workspace / ".fieldplan-web-secret"]


def test_secret_is_private_and_stable(workspace):
    a = create_app(workspace)
    b = create_app(workspace)
    assert a.state.secret == b.state.secret and len(a.state.secret) >= 32
    assert (workspace / ".fieldplan-web-secret").stat().st_mode & 0o077 == 0
    assert a.state.workspace == workspace.resolve()


def test_extra_router_included_and_self_authorised(workspace, monkeypatch):
    """A crew router at fieldplan.web.field is included; its paths skip the token and CSRF checks."""
    from fastapi import APIRouter

    import fieldplan.web.app as web_app

    module = types.ModuleType("fieldplan_test_field_router")
    module.router = APIRouter()

    @module.router.get("/field/{plan}/{crew}")
    def page(plan: str, crew: str):
        return {"plan": plan, "crew": crew}

    @module.router.post("/api/field/{plan}/sync")
    def sync(plan: str):
        return {"ok": plan}

    monkeypatch.setitem(sys.modules, module.__name__, module)
    monkeypatch.setattr(web_app, "EXTRA_ROUTERS", (module.__name__,))
    app = create_app(workspace, token=TOKEN, public=True)
    client = TestClient(app, base_url="http://192.0.2.10:8750")
    assert client.get("/field/p/1").json() == {"plan": "p", "crew": "1"}
    assert client.post("/api/field/p/sync").json() == {"ok": "p"}
    assert client.get("/api/plans").status_code == 401  # the rest still needs the token


def test_missing_extra_router_is_skipped(workspace, monkeypatch):
    import fieldplan.web.app as web_app

    monkeypatch.setattr(web_app, "EXTRA_ROUTERS", ("fieldplan.web.no_such_module",))
    assert TestClient(create_app(workspace), base_url=LOCAL).get("/").status_code == 200


def test_openapi_schema_served(client):
    schema = client.get("/api/openapi.json").json()
    assert schema["openapi"].startswith("3.")
    assert "/api/plans" in schema["paths"]


def test_serve_command_binds_loopback_and_needs_a_token_elsewhere(tmp_path, monkeypatch):
    """`fieldplan serve`: 127.0.0.1 by default; another address gets a generated token, printed in the URL."""
    import uvicorn
    from typer.testing import CliRunner

    from fieldplan.cli.main import app as cli

    calls = []
    monkeypatch.setattr(uvicorn, "run", lambda app, **kw: calls.append((app, kw)))
    runner = CliRunner()
    result = runner.invoke(cli, ["serve", str(tmp_path / "ws")])
    assert result.exit_code == 0, result.output
    app, kw = calls[-1]
    assert kw["host"] == "127.0.0.1" and kw["port"] == 8750
    assert app.state.token is None and not app.state.public
    assert "http://127.0.0.1:8750/" in result.output and "token" not in result.output

    result = runner.invoke(cli, ["serve", str(tmp_path / "ws"), "--host", "0.0.0.0", "--port", "9000"])
    assert result.exit_code == 0, result.output
    app, kw = calls[-1]
    assert kw["host"] == "0.0.0.0" and app.state.public and len(app.state.token) >= 32
    assert f"?token={app.state.token}" in result.output

    result = runner.invoke(cli, ["serve", str(tmp_path / "ws"), "--host", "0.0.0.0", "--token", "short"])
    assert result.exit_code == 2 and "at least 16" in result.output
    result = runner.invoke(cli, ["serve", str(tmp_path / "ws"), "--max-upload-mb", "5", "--token", TOKEN])
    app, _ = calls[-1]
    assert app.state.max_upload_bytes == 5_000_000 and app.state.token == TOKEN


def test_staged_uploads_removed_when_the_server_stops(workspace):
    from fieldplan.demo import demo_blocks_path

    with TestClient(create_app(workspace), base_url=LOCAL) as client:
        client.headers.update(_csrf(client))
        r = client.post("/api/uploads", files={"file": ("b.geojson", demo_blocks_path().read_bytes())})
        assert r.status_code == 201
        staged = client.app.state.uploads.get(r.json()["upload"]).folder
        assert staged.is_dir() and workspace not in staged.parents
    assert not staged.exists()


def test_static_files_revalidated_pages_not_stored(client):
    js = client.get("/static/leaflet/leaflet.js")
    assert js.status_code == 200 and js.headers["cache-control"] == "no-cache" and js.headers.get("etag")
    # reference: RFC 9110 section 13.1.2: If-None-Match with the current ETag answers 304
    again = client.get("/static/leaflet/leaflet.js", headers={"If-None-Match": js.headers["etag"]})
    assert again.status_code == 304
    assert client.get("/").headers["cache-control"] == "no-store"
    assert client.get("/api/plans").headers["cache-control"] == "no-store"


def test_json_answers_never_carry_nan():
    import json
    import math

    from fieldplan.web.api import _dumps

    # reference: RFC 8259 section 6: NaN and Infinity are not JSON numbers
    text = _dumps({"a": [1.0, math.nan, {"b": math.inf}], "c": "x"}).decode()
    assert json.loads(text) == {"a": [1.0, None, {"b": None}], "c": "x"}


def test_odd_characters_in_credentials_are_refused_not_errors(workspace):
    app = create_app(workspace, token=TOKEN, public=True)
    client = TestClient(app, base_url="http://192.0.2.10:8750")
    # Header values outside ASCII (latin-1 bytes) must give 401/403, never a server error.
    odd = "\u00e9t\u00e9-\u00e0-la-ferme".encode()
    assert client.get("/api/plans", headers={"Authorization": b"Bearer " + odd}).status_code == 401
    assert client.get("/api/plans", headers={"Cookie": b"fp_auth=" + odd}).status_code == 401
    assert client.get("/api/plans?token=%C3%A9t%C3%A9").status_code == 401
    local = TestClient(create_app(workspace), base_url=LOCAL)
    local.get("/api/session")
    r = local.post("/api/plans/x/marks", json={}, headers={"X-CSRF-Token": odd})
    assert r.status_code == 403
