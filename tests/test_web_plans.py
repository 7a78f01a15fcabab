"""Plan-page API against the CLI: every change made over HTTP leaves the folder the CLI would.

The reference of each parity check is the ``fieldplan`` command run on a copy of
the same plan folder with the same options (typer's CliRunner).
"""

from __future__ import annotations

import io
import shutil
import sqlite3
import threading
import zipfile
from pathlib import Path

import pandas as pd
import pytest

pytest.importorskip("fastapi")
from fastapi.testclient import TestClient  # noqa: E402
from typer.testing import CliRunner  # noqa: E402

from fieldplan.cli.main import app as cli  # noqa: E402
from fieldplan.demo import demo_blocks_path, demo_exclusions_path  # noqa: E402
from fieldplan.web.app import create_app  # noqa: E402

LOCAL = "http://127.0.0.1:8750"
EPOCH = "1800000000"
runner = CliRunner()


def _cli(*args: str) -> None:
    result = runner.invoke(cli, [str(a) for a in args])
    assert result.exit_code == 0, result.output


@pytest.fixture(scope="module")
def template(tmp_path_factory) -> Path:
    """A random plan with spares on the demo estate, written once by the CLI."""
    base = tmp_path_factory.mktemp("template")
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SOURCE_DATE_EPOCH", EPOCH)
        _cli(
            "plan", demo_blocks_path(), "--exclude", demo_exclusions_path(), "--design", "random",
            "--per-block", "4", "--spares", "2", "--seed", "11", "--out", base / "p", "-q",
        )  # fmt: skip
    return base / "p"


@pytest.fixture()
def ws(tmp_path, template, monkeypatch):
    """Two workspaces holding the same plan: one changed over HTTP, one by the CLI."""
    monkeypatch.setenv("SOURCE_DATE_EPOCH", EPOCH)
    monkeypatch.setenv("USER", "tester")
    web, ref = tmp_path / "web", tmp_path / "ref"
    for root in (web, ref):
        root.mkdir()
        shutil.copytree(template, root / "p")
    client = TestClient(create_app(web), base_url=LOCAL)
    client.headers["X-CSRF-Token"] = client.get("/api/session").json()["csrf"]
    return client, web / "p", ref / "p"


def _results_csv(path: Path, ids: list[str]) -> Path:
    rows = ["point_id,brix,date"]
    rows += [f"{pid},{20 + i * 0.5:.1f},2027-02-0{1 + i % 5}" for i, pid in enumerate(ids)]
    rows[3] = rows[3].split(",")[0] + ",2O.1,2027-02-03"  # a letter O for a zero: row 3 is a problem
    rows.append("NOT-A-POINT,21.0,2027-02-01")
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    return path


def test_home_and_plan_pages(ws):
    client, web, _ = ws
    home = client.get("/")
    assert home.status_code == 200 and 'href="/plans/p"' in home.text
    page = client.get("/plans/p")
    assert page.status_code == 200 and 'data-plan="p"' in page.text
    assert client.get("/plans/nope").status_code == 404
    assert client.get("/new").status_code == 200


def test_plan_detail_matches_the_folder(ws):
    client, web, _ = ws
    detail = client.get("/api/plans/p").json()
    points = pd.read_csv(web / "points.csv")
    # reference: points.csv written by `fieldplan plan` lists every point with its status
    assert detail["map"]["points"]["n"] == int((points["status"] != "spare").sum())
    assert detail["map"]["spares"]["n"] == int((points["status"] == "spare").sum())
    assert detail["plan"]["points"] == len(points) or detail["plan"]["blocks"] == 14
    names = {f["name"] for f in detail["files"]}
    assert {"points.gpx", "points.kml", "plan.gpkg", "manifest.json"} <= names
    listing = client.get("/api/plans").json()["plans"]
    assert [p["name"] for p in listing] == ["p"]


def test_crews_same_as_cli(ws):
    client, web, ref = ws
    r = client.post(
        "/api/plans/p/crews", json={"crews": 2, "start": [18.89605, -33.86014], "return_to_start": True}
    )
    assert r.status_code == 200, r.text
    assert [c["crew"] for c in r.json()["crews"]] == [1, 2]
    _cli("crews", ref, "--crews", "2", "--drop-off", "18.89605,-33.86014", "--return", "-q")
    for name in ("crews.csv", "points.csv", "crew_01.gpx", "crew_02.gpx", "points.gpx", "crews.json"):
        # reference: `fieldplan crews` with the same options on a copy of the plan
        assert (web / name).read_bytes() == (ref / name).read_bytes(), name
    again = client.post("/api/plans/p/crews", json={"crews": 3})
    assert again.status_code == 409 and again.json()["parameter"] == "force"
    assert client.post("/api/plans/p/crews", json={"crews": 3, "force": True}).status_code == 200


def test_crews_bad_options_name_the_parameter(ws):
    client, _, _ = ws
    for body, param in (
        ({"crews": 0}, "crews"),
        ({"crews": 2, "start": [18.9]}, "start"),
        ({"crews": 2, "walk_speed": -1}, "walk_speed"),
        ({}, "crews"),
    ):
        r = client.post("/api/plans/p/crews", json=body)
        assert r.status_code == 422 and r.json()["parameter"] == param, (body, r.text)
    r = client.post("/api/plans/p/crews", json={"crews": 2, "start": [200.0, 10.0]})
    assert r.status_code == 422 and r.json()["parameter"] == "start"


def test_results_listed_by_row_and_stored_as_cli(ws, tmp_path):
    client, web, ref = ws
    ids = pd.read_csv(web / "points.csv")["point_id"].astype(str).tolist()[:12]
    csv = _results_csv(tmp_path / "round1.csv", ids)
    r = client.post("/api/plans/p/results", files={"file": ("round1.csv", csv.read_bytes(), "text/csv")})
    assert r.status_code == 200, r.text
    body = r.json()
    assert body["round"] == 1 and body["values"] == ["brix"]
    rows = {(p["row"], p["problem"]) for p in body["problems"]}
    # Rows counted as a spreadsheet shows them: the header is row 1.
    assert (4, "not a number") in rows
    assert any(p["point_id"] == "NOT-A-POINT" and p["row"] == len(ids) + 2 for p in body["problems"])
    _cli("results", ref, csv, "-q")

    def stored(folder):
        with sqlite3.connect(folder / "plan.gpkg") as con:
            return pd.read_sql("SELECT * FROM results ORDER BY fid", con)

    # reference: `fieldplan results` on the same file stores the same round
    pd.testing.assert_frame_equal(stored(web), stored(ref))
    dup = client.post("/api/plans/p/results", files={"file": ("round1.csv", csv.read_bytes(), "text/csv")})
    assert dup.status_code == 400 and dup.json()["parameter"] == "allow_duplicate"
    assert "/tmp" not in dup.json()["error"] and str(web) not in dup.json()["error"]


def test_results_refuses_other_files(ws):
    client, _, _ = ws
    r = client.post("/api/plans/p/results", files={"file": ("x.exe", b"MZ", "application/octet-stream")})
    assert r.status_code == 415 and r.json()["parameter"] == "file"
    r = client.post("/api/plans/p/results", files={"file": ("x.csv", b"", "text/csv")})
    assert r.status_code == 422
    assert client.post("/api/plans/p/results").status_code == 422


def test_mark_brings_in_the_spare_as_the_cli_does(ws):
    client, web, ref = ws
    points = pd.read_csv(web / "points.csv")
    target = points[points["status"] == "selected"]["point_id"].iloc[0]
    r = client.post("/api/plans/p/marks", json={"point_ids": [target], "reason": "flooded", "by": "tester"})
    assert r.status_code == 200, r.text
    event = r.json()["events"][0]
    assert event["point_id"] == target and event["replacement_id"]
    _cli("mark", ref, target, "--inaccessible", "--reason", "flooded", "--recorded-by", "tester", "-q")
    # reference: `fieldplan mark` picks the same spare and writes the same points
    assert (web / "points.csv").read_bytes() == (ref / "points.csv").read_bytes()
    after = pd.read_csv(web / "points.csv").set_index("point_id")
    assert after.loc[target, "status"] == "inaccessible"
    assert after.loc[event["replacement_id"], "status"] == "replacement"
    r = client.post("/api/plans/p/marks", json={"point_ids": [target], "reason": "again"})
    assert r.status_code == 400 and "already" in r.json()["error"]
    r = client.post("/api/plans/p/marks", json={"point_ids": [target], "action": "restore"})
    assert r.status_code == 200 and r.json()["events"][0]["action"] == "restore"


def test_mark_needs_a_reason_and_known_ids(ws):
    client, _, _ = ws
    r = client.post("/api/plans/p/marks", json={"point_ids": ["V01-001"]})
    assert r.status_code == 400 and "reason" in r.json()["error"]
    r = client.post("/api/plans/p/marks", json={"point_ids": ["ZZ-999"], "reason": "x"})
    assert r.status_code == 400 and "ZZ-999" in r.json()["error"]
    r = client.post("/api/plans/p/marks", json={"point_ids": [], "reason": "x"})
    assert r.status_code == 422 and r.json()["parameter"] == "point_ids"
    r = client.post("/api/plans/p/marks", json={"point_ids": ["a"], "reason": "x", "action": "delete"})
    assert r.status_code == 422 and r.json()["parameter"] == "action"


def test_two_browsers_marking_at_once_lose_nothing(ws):
    client, web, _ = ws
    points = pd.read_csv(web / "points.csv")
    targets = points[points["status"] == "selected"].groupby("block")["point_id"].first().tolist()[:6]
    other = TestClient(client.app, base_url=LOCAL)
    other.headers["X-CSRF-Token"] = other.get("/api/session").json()["csrf"]
    answers = []

    def go(c, pid):
        answers.append(c.post("/api/plans/p/marks", json={"point_ids": [pid], "reason": "fence"}).status_code)

    threads = [
        threading.Thread(target=go, args=(client if i % 2 else other, pid)) for i, pid in enumerate(targets)
    ]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert answers == [200] * len(targets)
    with sqlite3.connect(web / "plan.gpkg") as con:
        marked = {r[0] for r in con.execute("SELECT point_id FROM events WHERE action = 'inaccessible'")}
    # common practice, no source: concurrent writers must not lose each other's updates
    assert marked == set(targets)
    after = pd.read_csv(web / "points.csv").set_index("point_id")
    assert (after.loc[targets, "status"] == "inaccessible").all()


def test_estimates_and_readiness_match_the_cli(ws, tmp_path):
    client, web, ref = ws
    ids = pd.read_csv(web / "points.csv")
    ids = ids[ids["status"] == "selected"]["point_id"].astype(str).tolist()
    csv = tmp_path / "r.csv"
    csv.write_text(
        "point_id,brix,date\n"
        + "".join(f"{p},{21 + (i % 7) * 0.4:.1f},2027-02-01\n" for i, p in enumerate(ids))
    )
    assert client.post("/api/plans/p/results", files={"file": ("r.csv", csv.read_bytes())}).status_code == 200
    _cli("results", ref, csv, "-q")
    r = client.get("/api/plans/p/estimates", params={"value": "brix", "target": 22})
    assert r.status_code == 200, r.text
    rows = {row["group"]: row for row in r.json()["rows"]}
    _cli("estimate", ref, "--variable", "brix", "--target", "22", "-q")
    expected = pd.read_csv(ref / "estimates.csv")
    for e in expected.itertuples(index=False):
        # reference: estimates.csv of `fieldplan estimate` (6 significant digits)
        assert rows[str(e.group)]["mean"] == pytest.approx(e.mean, rel=1e-5)
        assert rows[str(e.group)]["p_reached"] == pytest.approx(e.p_reached, abs=1e-5)
    from fieldplan.web.service import READINESS_BREAKS

    for row in rows.values():
        k = row["readiness_class"]
        edges = (0.0, *READINESS_BREAKS, 1.0000001)
        assert edges[k] <= row["p_reached"] < edges[k + 1]
    assert not (web / "estimates.csv").exists()  # looking does not write
    bad = client.get("/api/plans/p/estimates", params={"value": "brix", "by": "colour"})
    assert bad.status_code == 422 and bad.json()["parameter"] == "by"
    none = client.get("/api/plans/p/estimates", params={"value": "nitrogen"})
    assert none.status_code == 400


def test_estimates_without_results_is_409(ws):
    client, _, _ = ws
    r = client.get("/api/plans/p/estimates", params={"value": "brix"})
    assert r.status_code == 409 and r.json()["parameter"] == "value"


def test_coverage_matches_check(ws):
    client, web, ref = ws
    r = client.get("/api/plans/p/coverage", params={"min_per_block": 3, "max_gap": 500})
    assert r.status_code == 200
    runner.invoke(cli, ["check", str(ref), "--min-per-block", "3", "--max-gap", "500", "-q"])
    expected = pd.read_csv(ref / "coverage.csv")
    got = pd.DataFrame(r.json()["blocks"])
    # reference: coverage.csv of `fieldplan check` with the same rules
    assert got["block"].astype(str).tolist() == expected["block"].astype(str).tolist()
    assert got["n_points"].tolist() == expected["n_points"].tolist()
    assert got["status"].tolist() == expected["status"].tolist()
    assert not (web / "coverage.csv").exists()


def test_labels_and_lab_sheet_as_cli(ws):
    client, web, ref = ws
    assert client.post("/api/plans/p/labels", json={"layout": "a4-3x8"}).status_code == 200
    _cli("labels", ref, "--label-sheet", "a4-3x8", "-q")
    # reference: `fieldplan labels` writes the same PDF for the same plan and layout
    assert (web / "labels.pdf").read_bytes() == (ref / "labels.pdf").read_bytes()
    assert client.post("/api/plans/p/labels", json={"layout": "nonsense"}).status_code == 400
    r = client.post("/api/plans/p/labels", json={"layout": "letter-3x10", "round": 2, "include_spares": True})
    assert r.status_code == 200 and r.json()["file"] == "labels_r2.pdf" and r.json()["spares"] > 0
    _cli("labels", ref, "--label-sheet", "letter-3x10", "--round", "2", "--include-spares", "-q")
    # reference: `fieldplan labels --round 2 --include-spares`
    assert (web / "labels_r2.pdf").read_bytes() == (ref / "labels_r2.pdf").read_bytes()
    assert client.post("/api/plans/p/lab-sheet", json={"analyses": "pH,P,K"}).status_code == 200
    _cli("lab-sheet", ref, "--analyses", "pH,P,K", "-q")
    assert (web / "lab_submission.csv").read_bytes() == (ref / "lab_submission.csv").read_bytes()


def test_downloads_only_listed_files(ws):
    client, web, _ = ws
    r = client.get("/api/plans/p/files/points.kml")
    assert r.status_code == 200 and r.headers["content-disposition"].startswith("attachment")
    assert r.content == (web / "points.kml").read_bytes()
    (web / ".hidden").write_text("secret")
    for bad in (".hidden", "nope.csv", "..%2Fmanifest.json", "%2e%2e%2f..%2fetc%2fpasswd"):
        assert client.get(f"/api/plans/p/files/{bad}").status_code == 404, bad
    assert client.get("/api/plans/p/files/../../p/manifest.json").content != b"secret"


def test_zip_of_the_folder(ws):
    client, web, _ = ws
    r = client.get("/api/plans/p/zip")
    assert r.status_code == 200 and r.headers["content-type"] == "application/zip"
    names = zipfile.ZipFile(io.BytesIO(r.content)).namelist()
    assert "p/plan.gpkg" in names and "p/points.csv" in names
    assert all(n.startswith("p/") and ".." not in n for n in names)


def test_job_lookup_unknown(ws):
    client, _, _ = ws
    r = client.get("/api/jobs/nothing")
    assert r.status_code == 404 and r.json()["parameter"] == "job_id"


def test_next_season_from_the_recipe(ws):
    client, web, _ = ws
    r = client.post("/api/plans/p/duplicate", json={"name": "p-2028"})
    assert r.status_code == 202
    job = client.get(r.json()["status_url"]).json()
    while job["status"] not in ("done", "failed"):
        job = client.get(r.json()["status_url"]).json()
    assert job["status"] == "done", job
    old = pd.read_csv(web / "points.csv")
    new = pd.read_csv(web.parent / "p-2028" / "points.csv")
    # reference: the plan's own points: same recipe, blocks and seed revisit the same sites
    assert old[["point_id", "x", "y", "status"]].equals(new[["point_id", "x", "y", "status"]])
    again = client.post("/api/plans/p/duplicate", json={"name": "p-2028"})
    job = client.get(again.json()["status_url"]).json()
    while job["status"] not in ("done", "failed"):
        job = client.get(again.json()["status_url"]).json()
    assert job["status"] == "failed" and job["error"]["status"] == 409
    other = client.post("/api/plans/p/duplicate", json={"name": "p-2029", "seed": 12})
    job = client.get(other.json()["status_url"]).json()
    while job["status"] not in ("done", "failed"):
        job = client.get(other.json()["status_url"]).json()
    assert job["status"] == "done"
    moved = pd.read_csv(web.parent / "p-2029" / "points.csv")
    assert not old[["x", "y"]].equals(moved[["x", "y"]])
    assert client.post("/api/plans/p/duplicate", json={"name": "../x"}).status_code == 400


def test_api_docs_page_lists_every_route(ws):
    client, _, _ = ws
    page = client.get("/api/docs")
    assert page.status_code == 200 and "<script" not in page.text
    schema = client.get("/api/openapi.json").json()
    for path in schema["paths"]:
        assert path in page.text
    for path in ("/api/plans", "/api/plans/{name}", "/api/plans/{name}/crews", "/api/plans/{name}/results",
                 "/api/plans/{name}/marks", "/api/plans/{name}/estimates"):  # fmt: skip
        assert path in schema["paths"]


def test_estimates_saved_as_the_cli_writes_them(ws, tmp_path):
    client, web, ref = ws
    ids = pd.read_csv(web / "points.csv")
    ids = ids[ids["status"] == "selected"]["point_id"].astype(str).tolist()
    csv = tmp_path / "r.csv"
    csv.write_text(
        "point_id,brix,ta,date\n"
        + "".join(
            f"{p},{21 + (i % 5) * 0.5:.1f},{7 - (i % 4) * 0.3:.1f},2027-02-01\n" for i, p in enumerate(ids)
        )
    )
    assert client.post("/api/plans/p/results", files={"file": ("r.csv", csv.read_bytes())}).status_code == 200
    _cli("results", ref, csv, "-q")
    r = client.post("/api/plans/p/estimates", params={"value": "ta", "target": 6.5, "by": "variety"})
    assert r.status_code == 200 and r.json()["saved"] == "estimates.csv"
    _cli("estimate", ref, "--variable", "ta", "--target", "6.5", "--group-by", "variety", "-q")
    # reference: `fieldplan estimate` writes the same estimates.csv (acidity reached from above)
    assert (web / "estimates.csv").read_bytes() == (ref / "estimates.csv").read_bytes()
    assert (
        r.json()["direction"]
        != client.get(
            "/api/plans/p/estimates", params={"value": "ta", "target": 6.5, "target_below": False}
        ).json()["direction"]
    )
    home = client.get("/api/plans").json()["plans"][0]
    assert home["last_estimate"]["variable"] == "ta"


def test_summary_counts_spares_and_marked_points(ws):
    client, web, _ = ws
    points = pd.read_csv(web / "points.csv")
    plan = client.get("/api/plans/p").json()["plan"]
    # reference: points.csv of the plan, one row per point with its status
    assert plan["spares"] == int((points["status"] == "spare").sum()) > 0
    target = points[points["status"] == "selected"]["point_id"].iloc[0]
    client.post("/api/plans/p/marks", json={"point_ids": [target], "reason": "gate locked"})
    plan = client.get("/api/plans").json()["plans"][0]
    assert plan["inaccessible"] == 1 and plan["spares"] == int((points["status"] == "spare").sum()) - 1


def test_file_listing_and_summary_routes(ws):
    client, web, _ = ws
    files = client.get("/api/plans/p/files").json()["files"]
    # reference: the plan folder itself (regular, visible files)
    assert {f["name"] for f in files} == {
        p.name for p in web.iterdir() if p.is_file() and not p.name.startswith(".")
    }
    summary = client.get("/api/plans/p/summary").json()
    assert summary["name"] == "p" and summary["blocks"] == 14


def test_every_route_of_the_workspace_is_exercised():
    """Each route of the workspace's own routers appears in this module or its siblings' requests."""
    import re

    from fieldplan.web import api, pages

    here = Path(__file__).resolve().parent
    text = "".join(
        (here / n).read_text()
        for n in ("test_web.py", "test_web_plans.py", "test_web_new.py", "test_web_browser.py")
    )
    text += (here.parent / "fieldplan" / "web" / "static" / "plan.js").read_text()
    text += (here.parent / "fieldplan" / "web" / "static" / "new.js").read_text()
    for route in [*api.router.routes, *pages.router.routes]:
        # /api/plans/{name}/crews -> a regular expression matching how tests and pages call it
        pattern = re.escape(route.path)
        pattern = re.sub(r"\\\{[a-z_]+\\\}", r"[^\"'/ ]+", pattern).replace("/api/plans/", "/api/plans/")
        tail = route.path.rsplit("}", 1)[-1] or route.path
        assert re.search(pattern, text) or tail in text, route.path


def test_outliers_stop_the_import_until_accepted(ws, tmp_path):
    client, web, ref = ws
    ids = pd.read_csv(web / "points.csv")
    ids = ids[ids["status"] == "selected"]["point_id"].astype(str).tolist()[:20]
    values = [21.0 + (i % 5) * 0.2 for i in range(len(ids))]
    values[4] = 2.14  # a decimal slip (21.4)
    csv = tmp_path / "slip.csv"
    csv.write_text("point_id,brix\n" + "".join(f"{p},{v:g}\n" for p, v in zip(ids, values, strict=True)))
    r = client.post("/api/plans/p/results", files={"file": ("slip.csv", csv.read_bytes())})
    body = r.json()
    # reference: Iglewicz & Hoaglin 1993, modified z-score beyond 3.5 (as `fieldplan results` applies it)
    assert r.status_code == 422 and body["parameter"] == "accept_outliers"
    assert [o["point_id"] for o in body["outliers"]] == [ids[4]]
    with sqlite3.connect(web / "plan.gpkg") as con:
        assert "results" not in {t for (t,) in con.execute("SELECT table_name FROM gpkg_contents")}
    refused = runner.invoke(cli, ["results", str(ref), str(csv), "-q"])
    assert refused.exit_code == 2  # the command refuses the same file
    ok = client.post(
        "/api/plans/p/results",
        files={"file": ("slip.csv", csv.read_bytes())},
        data={"accept_outliers": "true"},
    )
    assert ok.status_code == 200 and ok.json()["round"] == 1


def test_xlsx_results_and_zip_checks(ws, tmp_path):
    import openpyxl

    client, web, ref = ws
    ids = pd.read_csv(web / "points.csv")
    ids = ids[ids["status"] == "selected"]["point_id"].astype(str).tolist()[:8]
    book = openpyxl.Workbook()
    sheet = book.active
    sheet.title = "lab"
    sheet.append(["point_id", "ph"])
    for i, pid in enumerate(ids):
        sheet.append([pid, 6.0 + 0.1 * i])
    path = tmp_path / "lab.xlsx"
    book.save(path)
    r = client.post(
        "/api/plans/p/results", files={"file": ("lab.xlsx", path.read_bytes())}, data={"sheet": "lab"}
    )
    assert r.status_code == 200, r.text
    _cli("results", ref, path, "--sheet", "lab", "-q")
    with sqlite3.connect(web / "plan.gpkg") as a, sqlite3.connect(ref / "plan.gpkg") as b:
        q = "SELECT round, point_id, variable, value FROM results ORDER BY fid"
        # reference: `fieldplan results --sheet lab` on the same workbook
        assert a.execute(q).fetchall() == b.execute(q).fetchall()
    bad = io.BytesIO()
    with zipfile.ZipFile(bad, "w") as z:
        z.writestr("../xl/workbook.xml", "x")
    r = client.post("/api/plans/p/results", files={"file": ("evil.xlsx", bad.getvalue())})
    assert r.status_code == 422 and "unsafe" in r.json()["error"]


def test_public_server_puts_crew_links_on_the_sheets(ws):
    _, web, _ = ws
    token = "a-long-enough-test-token-0123456789"
    client = TestClient(create_app(web.parent, token=token, public=True), base_url="http://192.0.2.7:8750")
    client.headers["Authorization"] = f"Bearer {token}"
    r = client.post("/api/plans/p/crews", json={"crews": 2})
    assert r.status_code == 200 and r.json()["links"]
    from fieldplan.field.links import crew_link, workspace_secret

    sheets = (web / "crew_sheets.html").read_text(encoding="utf-8")
    # reference: fieldplan.field.links.crew_link, the address the crew page checks
    for crew in (1, 2):
        link = crew_link("http://192.0.2.7:8750", workspace_secret(web.parent), "p", crew)
        assert link.replace("&", "&amp;") in sheets or link in sheets
    links = client.get("/api/plans/p").json()["crew_links"]
    assert [c["crew"] for c in links] == [1, 2] and all("/field/p/" in c["url"] for c in links)


def test_remove_round_as_the_cli(ws, tmp_path, monkeypatch):
    client, web, ref = ws
    ids = pd.read_csv(web / "points.csv")
    ids = ids[ids["status"] == "selected"]["point_id"].astype(str).tolist()[:10]
    csv = tmp_path / "r.csv"
    csv.write_text("point_id,brix\n" + "".join(f"{p},{21 + i * 0.1:.1f}\n" for i, p in enumerate(ids)))
    assert client.post("/api/plans/p/results", files={"file": ("r.csv", csv.read_bytes())}).status_code == 200
    _cli("results", ref, csv, "-q")
    r = client.post("/api/plans/p/results/remove", json={"round": 1, "reason": "wrong batch", "by": "tester"})
    assert r.status_code == 200 and r.json()["round"] == 1 and r.json()["values"] == 10
    _cli("results", ref, "--remove-round", "1", "--reason", "wrong batch", "--recorded-by", "tester")
    q = "SELECT round, point_id, variable, value FROM results_removed ORDER BY fid"
    with sqlite3.connect(web / "plan.gpkg") as a, sqlite3.connect(ref / "plan.gpkg") as b:
        # reference: `fieldplan results --remove-round 1` keeps the same rows aside
        assert a.execute(q).fetchall() == b.execute(q).fetchall()
        assert (
            a.execute("SELECT action, reason, user FROM events").fetchall()
            == b.execute("SELECT action, reason, user FROM events").fetchall()
        )
    again = client.post("/api/plans/p/results/remove", json={"round": 1})
    assert again.status_code == 400
