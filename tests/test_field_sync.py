"""Field records from crew phones: each stored once, nothing lost, conflicts listed, crew tokens bound.

The plan folder is made once through the CLI (ripeness plan with spares, two crews);
each test works on its own copy.
"""

from __future__ import annotations

import hashlib
import json
import shutil
import threading
import uuid
from pathlib import Path

import numpy as np
import pytest
from typer.testing import CliRunner

from fieldplan.cli.main import app as cli
from fieldplan.field.sync import (
    JOURNAL_NAME,
    _append_journal,
    apply_records,
    check_sample_id,
    field_conflicts,
    journal_records,
    read_journal,
    replacement_offers,
)
from fieldplan.store import load_plan
from fieldplan.write.gpkg import GPKG_NAME
from fieldplan.write.tables import points_lonlat

BLOCKS = {
    "type": "FeatureCollection",
    "features": [
        {
            "type": "Feature",
            "properties": {"block": name},
            "geometry": {
                "type": "Polygon",
                "coordinates": [
                    [[x0, 44.50], [x0 + 0.004, 44.50], [x0 + 0.004, 44.503], [x0, 44.503], [x0, 44.50]]
                ],
            },
        }
        for name, x0 in (("East", 7.900), ("West", 7.905))
    ],
}


@pytest.fixture(scope="module")
def made(tmp_path_factory):
    base = tmp_path_factory.mktemp("fieldsync")
    blocks = base / "blocks.geojson"
    blocks.write_text(json.dumps(BLOCKS))
    plan = base / "workspace" / "harvest"
    runner = CliRunner()
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SOURCE_DATE_EPOCH", "1800000000")
        for args in (
            ["plan", str(blocks), "--design", "random", "--per-block", "4", "--spares", "2",
             "--purpose", "ripeness", "--seed", "3", "--formats", "core", "--out", str(plan), "-q"],
            ["crews", str(plan), "--crews", "2", "-q"],
        ):  # fmt: skip
            result = runner.invoke(cli, args)
            assert result.exit_code == 0, result.output
    return plan


@pytest.fixture
def plan_dir(made, tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1800000000")
    return Path(shutil.copytree(made, tmp_path / "workspace" / "harvest"))


def crew_points(plan_dir: Path, crew: int):
    plan = load_plan(plan_dir)
    pts = plan.points[plan.points["crew"] == crew].sort_values("visit_order")
    return pts, points_lonlat(pts)


def taken(point, lonlat, *, value=None, minute=0, dlat=2e-5, **extra) -> dict:
    record = {
        "id": str(uuid.uuid4()),
        "kind": "taken",
        "point_id": point["point_id"],
        "time_utc": f"2027-02-20T07:{minute:02d}:00Z",
        "date": "2027-02-20",
        "lon": float(lonlat[0]),
        "lat": float(lonlat[1]) + dlat,
        "accuracy_m": 4.0,
        "sample_id": point["sample_id"],
        "variable": "brix" if value is not None else "",
        "value": value,
        "note": "",
    }
    record.update(extra)
    return record


def unreachable(point, *, minute=30, reason="standing water or mud") -> dict:
    return {
        "id": str(uuid.uuid4()),
        "kind": "unreachable",
        "point_id": point["point_id"],
        "time_utc": f"2027-02-20T07:{minute:02d}:00Z",
        "reason": reason,
        "note": "",
    }


def digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_records_apply_once_through_results_positions_and_mark(plan_dir):
    pts, ll = crew_points(plan_dir, 1)
    rows = list(pts.itertuples(index=False))
    batch = [taken(r._asdict(), ll[i], value=20.0 + i, minute=i) for i, r in enumerate(rows[:3])]
    batch.append(unreachable(rows[3]._asdict()))
    offers = replacement_offers(load_plan(plan_dir), [rows[3].point_id])
    report = apply_records(plan_dir, batch, crew=1)
    assert sorted(report.stored) == sorted(r["id"] for r in batch) and not report.refused
    layers = load_plan(plan_dir).layers
    assert sorted(layers["results"]["value"].astype(float)) == [20.0, 21.0, 22.0]
    assert sorted(layers["actual"]["point_id"]) == sorted(r.point_id for r in rows[:3])
    # reference: pyproj.Geod: 2e-5 degrees of latitude is 2.22 m at 44.5 degrees N
    assert np.allclose(layers["actual"]["offset_m"].astype(float), 2.22, atol=0.02)
    events = layers["events"]
    assert list(events["point_id"]) == [rows[3].point_id] and list(events["user"]) == ["crew 1"]
    # The spare the page offered is the one `mark` brought in.
    assert events["replacement_id"].iloc[0] == offers[rows[3].point_id]["replacement_id"] != ""
    spare = load_plan(plan_dir).points.set_index("point_id").loc[events["replacement_id"].iloc[0]]
    assert offers[rows[3].point_id]["sample_id"] == spare["sample_id"]  # the bag to use there
    before = digest(plan_dir / GPKG_NAME)

    again = apply_records(plan_dir, batch, crew=1)
    assert sorted(again.duplicates) == sorted(r["id"] for r in batch)
    assert again.stored == [] and again.round_no is None and again.events == []
    assert digest(plan_dir / GPKG_NAME) == before
    assert len(journal_records(read_journal(plan_dir))) == 4


def test_offer_matches_mark_for_every_point(plan_dir, tmp_path):
    """What the page offers offline is what `fieldplan mark` then does, point by point."""
    plan = load_plan(plan_dir)
    offers = replacement_offers(plan)
    selected = plan.points.loc[plan.points["status"] == "selected", "point_id"].astype(str).tolist()
    runner = CliRunner()
    for pid in selected[:3]:
        copy = shutil.copytree(plan_dir, tmp_path / f"copy-{pid}")
        result = runner.invoke(cli, ["mark", str(copy), pid, "--inaccessible", "--reason", "flooded"])
        assert result.exit_code == 0, result.output
        # reference: `fieldplan mark` (the rule in docs/field-changes.md: first unused spare of the stratum)
        assert f"sample {offers[pid]['replacement_id']} instead" in result.output


def test_refused_records_are_kept_and_reported(plan_dir):
    pts, ll = crew_points(plan_dir, 1)
    rows = [r._asdict() for r in pts.itertuples(index=False)]
    wrong_bag = taken(rows[0], ll[0], sample_id=rows[1]["sample_id"])
    typo = taken(
        rows[1], ll[1], sample_id=rows[1]["sample_id"][:-1] + "Z"[: rows[1]["sample_id"][-1] != "Z"] or "Y"
    )
    ghost = taken(rows[2], ll[2])
    ghost["point_id"] = "NOT-A-POINT"
    wild = taken(rows[2], ll[2], value=85.0)
    report = apply_records(plan_dir, [wrong_bag, typo, ghost, wild], crew=1)
    assert set(report.refused) == {wrong_bag["id"], typo["id"], ghost["id"], wild["id"]}
    assert "another point's bag" in report.refused[wrong_bag["id"]]
    assert "check character" in report.refused[typo["id"]]
    assert "outside the plausible" in report.refused[wild["id"]]
    kept = journal_records(read_journal(plan_dir))
    assert {r["id"] for r in kept} == set(report.refused) and all(r["problem"] for r in kept)
    assert "results" not in load_plan(plan_dir).layers
    # Sent again, the phone hears the same answer (it may have missed the first one).
    again = apply_records(plan_dir, [wrong_bag], crew=1)
    assert again.refused == {wrong_bag["id"]: report.refused[wrong_bag["id"]]}


def test_reused_id_with_other_content_keeps_the_first(plan_dir):
    pts, ll = crew_points(plan_dir, 1)
    row = next(pts.itertuples(index=False))._asdict()
    first = taken(row, ll[0], value=18.5)
    apply_records(plan_dir, [first], crew=1)
    forged = {**first, "value": 25.0}
    report = apply_records(plan_dir, [forged], crew=1)
    assert forged["id"] in report.refused
    assert load_plan(plan_dir).layers["results"]["value"].astype(float).tolist() == [18.5]


def test_two_crews_on_one_point_are_both_kept_as_a_conflict(plan_dir):
    pts, ll = crew_points(plan_dir, 1)
    row = next(pts.itertuples(index=False))._asdict()
    a = taken(row, ll[0], value=19.0, minute=5)
    b = taken(row, ll[0], value=23.0, minute=40, dlat=-3e-5)
    apply_records(plan_dir, [a], crew=1)
    report = apply_records(plan_dir, [b], crew=2)
    assert report.stored == [b["id"]]
    conflicts = field_conflicts(plan_dir)
    assert [c["kind"] for c in conflicts] == ["taken twice"]
    assert {r["id"] for r in conflicts[0]["records"]} == {a["id"], b["id"]}
    assert {r["crew"] for r in conflicts[0]["records"]} == {"1", "2"}
    results = load_plan(plan_dir).layers["results"]
    # Day round 1 held crew 1's value; round 2 is the day with both, the earliest kept and the other flagged.
    assert results.groupby("round")["value"].apply(list).to_dict() == {1: [19.0], 2: [19.0]}
    assert any("duplicate" in n for n in report.notes)
    assert {r["id"] for r in journal_records(read_journal(plan_dir))} == {a["id"], b["id"]}


def test_taken_while_marked_inaccessible_at_the_office(plan_dir):
    pts, ll = crew_points(plan_dir, 2)
    row = next(pts.itertuples(index=False))._asdict()
    result = CliRunner().invoke(
        cli,
        [
            "mark",
            str(plan_dir),
            row["point_id"],
            "--inaccessible",
            "--reason",
            "gate locked",
            "--by",
            "office",
        ],
    )
    assert result.exit_code == 0, result.output
    events_before = load_plan(plan_dir).layers["events"]
    report = apply_records(plan_dir, [taken(row, ll[0], value=21.0)], crew=2)
    assert report.stored
    plan = load_plan(plan_dir)
    layers = plan.layers
    # Nothing overwritten: the office's mark stands, the crew's value is stored beside it.
    assert len(layers["events"]) == len(events_before)
    assert plan.points.set_index("point_id").at[row["point_id"], "status"] == "inaccessible"
    assert layers["results"]["point_id"].tolist() == [row["point_id"]]
    kinds = [c["kind"] for c in report.conflicts]
    assert kinds == ["taken but inaccessible"]
    assert report.conflicts[0]["events"] == [int(events_before["event_id"].iloc[0])]


def test_interrupted_sync_is_finished_by_the_next(plan_dir):
    """Records in the journal but not yet in the plan (a crash in between) are applied next time, once."""
    pts, ll = crew_points(plan_dir, 1)
    rows = [r._asdict() for r in pts.itertuples(index=False)]
    batch = [taken(rows[0], ll[0], value=20.5), unreachable(rows[1])]
    _append_journal(plan_dir, [{"type": "record", **r, "crew": "1", "received_utc": "x"} for r in batch])
    for r in batch[1:]:
        r.setdefault("lon", None)
    report = apply_records(plan_dir, [], crew=1)
    layers = load_plan(plan_dir).layers
    assert layers["results"]["value"].astype(float).tolist() == [20.5]
    assert layers["events"]["point_id"].tolist() == [rows[1]["point_id"]]
    assert report.events and report.round_no == 1
    before = digest(plan_dir / GPKG_NAME)
    apply_records(plan_dir, [], crew=1)
    assert digest(plan_dir / GPKG_NAME) == before


def test_concurrent_uploads_of_the_same_batch_store_it_once(plan_dir):
    pts, ll = crew_points(plan_dir, 1)
    rows = [r._asdict() for r in pts.itertuples(index=False)]
    batch = [taken(rows[i], ll[i], value=19.0 + i, minute=i) for i in range(2)] + [unreachable(rows[2])]
    reports = []
    threads = [
        threading.Thread(target=lambda: reports.append(apply_records(plan_dir, batch, crew=1)))
        for _ in range(3)
    ]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert sorted(len(r.stored) for r in reports) == [0, 0, 3]
    layers = load_plan(plan_dir).layers
    assert len(layers["events"]) == 1 and len(layers["results"]) == 2
    assert len(journal_records(read_journal(plan_dir))) == 3


def test_torn_last_journal_line_is_skipped(plan_dir):
    pts, ll = crew_points(plan_dir, 1)
    row = next(pts.itertuples(index=False))._asdict()
    apply_records(plan_dir, [taken(row, ll[0])], crew=1)
    with (plan_dir / JOURNAL_NAME).open("a", encoding="utf-8") as handle:
        handle.write('{"type": "record", "id": "cut sh')
    assert len(journal_records(read_journal(plan_dir))) == 1


def test_sample_id_check_follows_ids_module():
    from fieldplan.samples.ids import make_sample_ids

    planned, other = make_sample_ids(2, code="QX7M")
    assert check_sample_id(planned.lower().replace("-", ""), planned) == ""
    assert "another point's bag" in check_sample_id(other, planned)
    # reference: fieldplan.samples.ids: any single substitution breaks the mod-31 check
    typo = planned[:-2] + ("3" if planned[-2] != "3" else "4") + planned[-1]
    assert "check character" in check_sample_id(typo, planned)
    assert check_sample_id("", "") == ""


def test_exported_file_applies_through_the_cli(plan_dir, tmp_path):
    pts, ll = crew_points(plan_dir, 1)
    rows = [r._asdict() for r in pts.itertuples(index=False)]
    records = [taken(rows[0], ll[0], value=22.0), unreachable(rows[1])]
    file = tmp_path / "fieldplan-harvest-crew1-records.json"
    doc = {"format": "fieldplan-records", "version": 1, "plan": "harvest", "crew": 1, "records": records}
    file.write_text(json.dumps(doc))
    runner = CliRunner()
    first = runner.invoke(cli, ["field-records", str(plan_dir), str(file)])
    assert first.exit_code == 0, first.output
    assert "2 new record(s)" in first.output
    second = runner.invoke(cli, ["field-records", str(plan_dir), str(file)])
    assert second.exit_code == 0 and "0 new record(s), 2 already stored" in second.output
    bad = tmp_path / "bad.json"
    bad.write_text("[1, 2]")
    refused = runner.invoke(cli, ["field-records", str(plan_dir), str(bad)])
    assert refused.exit_code == 2 and "not a crew page export" in refused.output


# ---- endpoints (framework test client) ----


@pytest.fixture
def client(plan_dir):
    from fastapi.testclient import TestClient

    from fieldplan.web.app import create_app

    app = create_app(plan_dir.parent)
    other = plan_dir.parent / "other-plan"
    shutil.copytree(plan_dir, other)
    return TestClient(app, base_url="http://127.0.0.1"), app


def test_crew_token_is_bound_to_its_plan_and_crew(client, plan_dir):
    from fieldplan.field.links import crew_token

    http, app = client
    t1 = crew_token(app.state.secret, "harvest", 1)
    assert http.get(f"/api/field/harvest/1/data?t={t1}").status_code == 200
    # reference: RFC 2104 HMAC: a token made for one message does not verify another
    assert http.get(f"/api/field/harvest/2/data?t={t1}").status_code == 403
    assert http.get(f"/api/field/other-plan/1/data?t={t1}").status_code == 403
    assert http.get("/api/field/harvest/1/data").status_code == 403
    assert http.get("/field/harvest/2/?t=" + t1).status_code == 403
    body = {"records": []}
    assert (
        http.post("/api/field/other-plan/1/records", json=body, headers={"x-crew-token": t1}).status_code
        == 403
    )
    assert (
        http.post("/api/field/harvest/2/records", json=body, headers={"x-crew-token": t1}).status_code == 403
    )
    # The records endpoint takes its token from a header only (no cross-site form can post).
    assert http.post(f"/api/field/harvest/1/records?t={t1}", json=body).status_code == 403
    ok = http.post("/api/field/harvest/1/records", json=body, headers={"x-crew-token": t1})
    assert ok.status_code == 200 and ok.json()["stored"] == []
    assert not (plan_dir.parent / "other-plan" / JOURNAL_NAME).exists()


def test_crew_data_holds_only_the_crews_points(client, plan_dir):
    from fieldplan.field.links import crew_token

    http, app = client
    data = http.get(f"/api/field/harvest/2/data?t={crew_token(app.state.secret, 'harvest', 2)}").json()
    plan = load_plan(plan_dir)
    expected = plan.points[plan.points["crew"] == 2].sort_values("visit_order")["point_id"].tolist()
    assert [p["point_id"] for p in data["points"]] == expected
    assert data["max_offset_m"] == 10.0 and data["variable"] == "brix"
    assert data["route"] and data["blocks"] and data["cautions"]
    assert all(p["offer"]["replacement_id"] for p in data["points"])


def test_page_manifest_worker_and_static_files(client):
    from fieldplan.field.links import crew_token

    http, app = client
    t = crew_token(app.state.secret, "harvest", 1)
    page = http.get(f"/field/harvest/1/?t={t}")
    assert page.status_code == 200 and "script-src 'self'" in page.headers["content-security-policy"]
    assert "<script>" not in page.text  # no inline script
    link = http.get(f"/field/harvest/1?t={t}", follow_redirects=False)
    assert link.status_code == 307 and link.headers["location"] == f"/field/harvest/1/?t={t}"
    manifest = http.get(f"/field/harvest/1/manifest.webmanifest?t={t}").json()
    # reference: W3C Web Application Manifest: start_url must lie within scope
    assert manifest["start_url"].startswith(manifest["scope"]) and manifest["display"] == "standalone"
    assert {i["sizes"] for i in manifest["icons"]} == {"192x192", "512x512"}
    assert http.get("/field/harvest/1/sw.js").status_code == 200
    assert http.get("/field/static/leaflet/leaflet.js").status_code == 200
    for bad in ("../field.py", "leaflet/../../app.py", "nothing.js", "leaflet/leaflet-src.esm.js"):
        assert http.get(f"/field/static/{bad}").status_code == 404


def test_conflicts_endpoint(client, plan_dir):
    from fieldplan.field.links import crew_token

    http, app = client
    pts, ll = crew_points(plan_dir, 1)
    row = next(pts.itertuples(index=False))._asdict()
    for crew in (1, 2):
        t = crew_token(app.state.secret, "harvest", crew)
        answer = http.post(
            "/api/field/harvest/" + str(crew) + "/records",
            json={"records": [taken(row, ll[0], value=20.0 + crew, minute=crew)]},
            headers={"x-crew-token": t},
        )
        assert answer.status_code == 200
    t1 = crew_token(app.state.secret, "harvest", 1)
    listed = http.get(f"/api/field/harvest/conflicts?crew=1&t={t1}").json()["conflicts"]
    assert [c["point_id"] for c in listed] == [row["point_id"]]
    # A workspace with an access token: crew links and the bearer token open the list, nothing else.
    from fastapi.testclient import TestClient

    from fieldplan.web.app import create_app

    locked = TestClient(create_app(plan_dir.parent, token="office-key"), base_url="http://127.0.0.1")
    assert locked.get(f"/api/field/harvest/conflicts?crew=1&t={t1}").status_code == 200
    assert locked.get(f"/api/field/harvest/conflicts?crew=2&t={t1}").status_code == 403
    assert locked.get("/api/field/harvest/conflicts").status_code == 403
    office = locked.get("/api/field/harvest/conflicts", headers={"authorization": "Bearer office-key"})
    assert office.status_code == 200 and office.json()["conflicts"][0]["kind"] == "taken twice"


def test_crew_links_for_the_office(plan_dir):
    from fastapi.testclient import TestClient

    from fieldplan.field.links import check_crew_token
    from fieldplan.web.app import create_app

    app = create_app(plan_dir.parent, token="office-key")
    http = TestClient(app, base_url="http://127.0.0.1")
    assert http.get("/api/field/harvest/links").status_code == 403
    answer = http.get(
        "/api/field/harvest/links?base=http://10.0.0.7:8750", headers={"authorization": "Bearer office-key"}
    )
    assert answer.status_code == 200
    crews = answer.json()["crews"]
    assert [c["crew"] for c in crews] == [1, 2]
    for c in crews:
        assert c["url"].startswith(f"http://10.0.0.7:8750/field/harvest/{c['crew']}/?t=")
        # reference: RFC 2104 HMAC bound to plan and crew
        assert check_crew_token(app.state.secret, "harvest", c["crew"], c["url"].rsplit("=", 1)[1])
        assert c["qr_svg"].startswith("<svg")


def test_later_round_labels_are_the_same_bag(plan_dir):
    """Bags labelled for a later round (`fieldplan labels --round`) belong to the same point."""
    from fieldplan.samples.ids import round_sample_ids

    pts, ll = crew_points(plan_dir, 1)
    rows = [r._asdict() for r in pts.itertuples(index=False)]
    week2 = round_sample_ids([rows[0]["sample_id"], rows[1]["sample_id"]], 2)
    good = taken(rows[0], ll[0], sample_id=week2[0], value=20.0)
    other = taken(rows[0], ll[0], sample_id=week2[1], value=20.0, minute=3)
    report = apply_records(plan_dir, [good, other], crew=1)
    # reference: fieldplan.samples.ids.round_sample_ids (label rounds keep the serial, new plan code)
    assert report.stored == [good["id"]]
    assert "another point's bag" in report.refused[other["id"]]


def test_busy_plan_answers_a_clear_error(plan_dir):
    """A sync waits for the plan's write lock (held here by another thread, as `mark` would)."""
    from fieldplan.lock import PlanBusyError
    from fieldplan.store import locked

    pts, ll = crew_points(plan_dir, 1)
    row = next(pts.itertuples(index=False))._asdict()
    holding, release = threading.Event(), threading.Event()

    def hold():
        with locked(plan_dir):
            holding.set()
            release.wait(10)

    holder = threading.Thread(target=hold)
    holder.start()
    holding.wait(10)
    try:
        with pytest.raises(PlanBusyError):
            apply_records(plan_dir, [taken(row, ll[0])], crew=1, lock_timeout=0.3)
    finally:
        release.set()
        holder.join()
    assert not (plan_dir / JOURNAL_NAME).exists()  # nothing half-kept
    assert apply_records(plan_dir, [taken(row, ll[0])], crew=1).stored  # and fine once free


def test_a_late_day_is_stored_with_a_note(plan_dir):
    pts, ll = crew_points(plan_dir, 1)
    rows = [r._asdict() for r in pts.itertuples(index=False)]
    apply_records(plan_dir, [taken(rows[0], ll[0], value=21.0)], crew=1)
    late = taken(rows[1], ll[1], value=19.0, time_utc="2027-02-19T09:00:00Z", date="2027-02-19")
    report = apply_records(plan_dir, [late], crew=2)
    assert report.round_no == 2
    assert any("2027-02-19 arrived after field values of 2027-02-20" in n for n in report.notes)


def test_grid_offers_the_cells_substitute_as_mark_does(tmp_path, monkeypatch):
    """Grid plans with within-cell substitutes: the page offers the point's own substitute."""
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1800000000")
    blocks = tmp_path / "blocks.geojson"
    blocks.write_text(json.dumps(BLOCKS))
    plan_dir = tmp_path / "workspace" / "grid"
    runner = CliRunner()
    for args in (
        ["plan", str(blocks), "--spacing", "90", "--substitute", "within-cell", "--seed", "8",
         "--formats", "core", "--out", str(plan_dir), "-q"],
        ["crews", str(plan_dir), "--crews", "1", "-q"],
    ):  # fmt: skip
        result = runner.invoke(cli, args)
        assert result.exit_code == 0, result.output
    plan = load_plan(plan_dir)
    pid = str(plan.points["point_id"].iloc[2])
    offer = replacement_offers(plan, [pid])[pid]
    assert offer["kind"] == "substitute" and offer["replacement_id"] == pid + "-S"
    sub = plan.layers["substitutes"].set_index("point_id").to_crs(4326).geometry[pid]
    assert abs(offer["lon"] - sub.x) < 1e-6 and abs(offer["lat"] - sub.y) < 1e-6
    report = apply_records(plan_dir, [unreachable({"point_id": pid})], crew=1)
    # reference: `fieldplan mark` (within-cell substitute, docs/field-changes.md)
    assert report.events[0]["replacement_id"] == offer["replacement_id"]


def test_crew_link_needs_no_workspace_token_and_opens_nothing_else(plan_dir):
    """A workspace served beyond localhost has an access token; the crew link works without it."""
    from fastapi.testclient import TestClient

    from fieldplan.field.links import crew_token
    from fieldplan.web.app import create_app

    app = create_app(plan_dir.parent, token="office-key-0123456789", public=True)
    http = TestClient(app, base_url="http://10.0.0.7:8750")
    t = crew_token(app.state.secret, "harvest", 1)
    assert http.get(f"/field/harvest/1/?t={t}").status_code == 200
    assert http.get(f"/api/field/harvest/1/data?t={t}").status_code == 200
    assert http.get("/field/static/crew.js").status_code == 200
    posted = http.post("/api/field/harvest/1/records", json={"records": []}, headers={"x-crew-token": t})
    assert posted.status_code == 200
    # The crew token is no key to the workspace itself.
    assert http.get(f"/api/plans?t={t}", headers={"x-crew-token": t}).status_code == 401
    assert http.get("/plans/harvest", headers={"authorization": f"Bearer {t}"}).status_code == 401
    assert http.get("/api/field/harvest/links", headers={"x-crew-token": t}).status_code == 403
