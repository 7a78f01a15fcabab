"""Marking points inaccessible: spares in rank order, substitutes, audit trail, exact undo."""

from __future__ import annotations

import shutil
import sqlite3
from datetime import UTC, datetime
from pathlib import Path

import numpy as np
import pytest
import shapely
from typer.testing import CliRunner

from fieldplan.errors import OptionError
from fieldplan.field.events import read_events
from fieldplan.field.mark import mark_points, substitution_summary
from fieldplan.field.spares import split_draw
from fieldplan.field.substitutes import substitutes_layer
from fieldplan.plan import make_plan
from fieldplan.store import load_plan, write_plan
from tests.geoms import E0, N0, blocks_frame

NOW = datetime(2027, 3, 1, 8, 0, tzinfo=UTC)


def _plan(spares: int = 3, substitutes: bool = False):
    blocks = blocks_frame(
        {
            "A": shapely.box(E0, N0, E0 + 200, N0 + 150),
            "B": shapely.box(E0 + 300, N0, E0 + 500, N0 + 150),
        }
    )
    plan = make_plan(blocks, spacing=50, seed=5, command=["fieldplan", "test"])
    pts = plan.points
    if spares:
        # The plan's draw order within each block: the last `spares` points serve as spares.
        status, rank = [], []
        for _, group in pts.groupby("stratum", sort=False):
            s, r = split_draw(len(group), len(group) - spares)
            status += s.tolist()
            rank += r.tolist()
        pts["status"] = status
        pts["spare_rank"] = rank
    if substitutes:
        n = len(pts)
        plan.layers["substitutes"] = substitutes_layer(
            pts, [blocks.geometry.union_all()] * n, [0.0] * n, seed=5, spacing=50.0
        )
        plan.params["substitute"] = "within-cell"
    return plan


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    """Both test plans written once; each test works on its own copy."""
    base = tmp_path_factory.mktemp("plans")
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("SOURCE_DATE_EPOCH", "1800000000")
        return {
            "spares": write_plan(_plan(), base / "spares"),
            "grid": write_plan(_plan(spares=0, substitutes=True), base / "grid"),
        }


@pytest.fixture
def no_png(monkeypatch):
    # The page image is slow to draw and checked by the exact-undo tests only.
    import fieldplan.store

    kept = [w for w in fieldplan.store.WRITERS if "png" not in getattr(w, "__name__", "")]
    monkeypatch.setattr(fieldplan.store, "WRITERS", kept)


@pytest.fixture
def plan_dir(written, tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1800000000")
    return Path(shutil.copytree(written["spares"], tmp_path / "plan"))


def _files(folder):
    # Hidden files are the store's bookkeeping (lock, generation), not outputs.
    keep = [p for p in sorted(folder.iterdir()) if p.is_file() and p.name != "plan.gpkg"]
    return {p.name: p.read_bytes() for p in keep if not p.name.startswith(".")}


def _status(folder):
    pts = load_plan(folder).points
    return dict(zip(pts["point_id"], pts["status"], strict=True))


def test_inaccessible_point_brings_in_first_spare_of_its_stratum(plan_dir, no_png):
    # reference: the first n accessible units of a random order are a simple random sample of
    # the accessible units (definition of SRS without replacement, Cochran 1977 §2.2, from memory).
    result = mark_points(plan_dir, ["A-002"], reason="flooded", by="ana", now=NOW)
    import gpxpy

    # reference: GPX 1.1 waypoints parsed with gpxpy; nobody is sent to a point given up.
    names = [w.name for w in gpxpy.parse((plan_dir / "points.gpx").read_text(encoding="utf-8")).waypoints]
    assert "A-002" not in names and "A-001" in names
    status = _status(plan_dir)
    assert status["A-002"] == "inaccessible"
    first_spare = load_plan(plan_dir).points.query("block == 'A' and spare_rank == 1")["point_id"].item()
    assert status[first_spare] == "replacement"
    assert result.events["replacement_id"].tolist() == [first_spare]
    assert sum(v == "replacement" for v in status.values()) == 1
    events = read_events(plan_dir / "plan.gpkg")
    assert events[["user", "action", "point_id", "reason"]].values.tolist() == [
        ["ana", "inaccessible", "A-002", "flooded"]
    ]
    assert events["time_utc"].tolist() == ["2027-03-01T08:00:00Z"]
    summary = substitution_summary(load_plan(plan_dir)).set_index("stratum")
    assert (
        summary.loc["A", "n_replacement"] == 1
        and summary.loc["A", "n_sampled"] == summary.loc["A", "n_planned"]
    )


def test_mark_then_restore_gives_back_the_same_files_and_events_only_grow(plan_dir):
    # common practice, no source: an audit trail is append-only; undoing a mark restores the plan.
    before = _files(plan_dir)
    mark_points(plan_dir, ["A-001", "B-003"], reason="gate locked", now=NOW)
    assert _files(plan_dir)["points.csv"] != before["points.csv"]
    mark_points(plan_dir, ["A-001", "B-003"], action="restore", now=NOW)
    assert _files(plan_dir) == before
    events = read_events(plan_dir / "plan.gpkg")
    assert events["event_id"].tolist() == [1, 2, 3, 4]
    assert events["action"].tolist() == ["inaccessible"] * 2 + ["restore"] * 2


def test_order_of_marks_does_not_matter_and_spares_skip_inaccessible_ones(plan_dir, tmp_path, no_png):
    # reference: rule "sample = first n accessible points of the draw order" depends only on the
    # set of inaccessible points (same SRS argument as above, Cochran 1977 §2.2, from memory).
    other = Path(shutil.copytree(plan_dir, tmp_path / "other"))
    spares = load_plan(plan_dir).points.query("block == 'A' and spare_rank > 0").sort_values("spare_rank")
    s1, s2 = spares["point_id"].tolist()[:2]
    mark_points(plan_dir, [s1], reason="ditch", now=NOW)
    mark_points(plan_dir, ["A-001"], reason="ditch", now=NOW)
    mark_points(other, ["A-001"], reason="ditch", now=NOW)
    mark_points(other, [s1], reason="ditch", now=NOW)
    assert _files(plan_dir) == _files(other)
    assert _status(plan_dir)[s2] == "replacement"


def test_within_cell_substitute_takes_the_place_and_restore_is_exact(written, tmp_path, monkeypatch):
    # reference: within-cell substitute keeps each lattice cell represented (systematic sampling
    # with a random start, Cochran 1977 ch. 8); common practice, no source, for exact undo.
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1800000000")
    folder = Path(shutil.copytree(written["grid"], tmp_path / "grid"))
    before = _files(folder)
    mark_points(folder, ["B-002"], reason="rock", now=NOW)
    pts = load_plan(folder).points
    ids = pts["point_id"].tolist()
    assert ids[ids.index("B-002") + 1] == "B-002-S"
    assert pts.set_index("point_id").loc["B-002-S", "status"] == "substitute"
    summary = substitution_summary(load_plan(folder)).set_index("stratum")
    assert summary.loc["B", "n_substitute"] == 1 and "within-cell" in summary.loc["B", "rule"]
    mark_points(folder, ["B-002"], action="restore", now=NOW)
    assert _files(folder) == before


def test_events_table_is_a_valid_geopackage_attribute_table(plan_dir, no_png):
    # reference: OGC GeoPackage 1.3 (OGC 12-128r18) gpkg_contents.data_type 'attributes' for
    # non-spatial tables, 'features' for vector layers.
    mark_points(plan_dir, ["A-001"], reason="x", now=NOW)
    with sqlite3.connect(plan_dir / "plan.gpkg") as con:
        kinds = dict(con.execute("select table_name, data_type from gpkg_contents").fetchall())
        assert con.execute("pragma integrity_check").fetchone()[0] == "ok"
    assert kinds["events"] == "attributes"
    assert kinds["points_planned"] == "features" and kinds["points"] == "features"


def test_bad_marks_are_refused(plan_dir, no_png):
    # common practice, no source: a mark names a real point and cannot be applied twice.
    with pytest.raises(OptionError, match="not in this plan"):
        mark_points(plan_dir, ["Z-999"], reason="x")
    mark_points(plan_dir, ["A-001"], reason="x")
    with pytest.raises(OptionError, match="already"):
        mark_points(plan_dir, ["A-001"], reason="x")
    with pytest.raises(OptionError, match="not marked"):
        mark_points(plan_dir, ["A-002"], action="restore")


def test_mark_ids_match_whatever_their_case(plan_dir, no_png):
    # common practice, no source: ids read off a label or typed on a phone change case
    # ("a-002"); the plan's own spelling is recorded, and restore matches the same way.
    mark_points(plan_dir, ["a-002", "b-001"], reason="flooded", now=NOW)
    events = read_events(plan_dir / "plan.gpkg")
    assert events["point_id"].tolist() == ["A-002", "B-001"]
    assert _status(plan_dir)["A-002"] == "inaccessible"
    with pytest.raises(OptionError, match="already"):
        mark_points(plan_dir, ["A-002"], reason="x")
    mark_points(plan_dir, ["A-002", "b-001"], action="restore", now=NOW)
    assert read_events(plan_dir / "plan.gpkg")["point_id"].tolist()[-2:] == ["A-002", "B-001"]


def test_cli_mark_and_restore(plan_dir, tmp_path, no_png):
    # common practice, no source: errors are one line and exit code 2.
    from fieldplan.cli.main import app

    runner = CliRunner()
    ids = tmp_path / "ids.txt"
    ids.write_text("point_id\nA-003\n", encoding="utf-8")
    out = runner.invoke(
        app, ["mark", str(plan_dir), "--ids-file", str(ids), "--inaccessible", "--reason", "=cmd"]
    )
    assert out.exit_code == 0, out.output
    assert "A-003: inaccessible" in out.output
    assert read_events(plan_dir / "plan.gpkg")["reason"].tolist() == ["=cmd"]
    out = runner.invoke(app, ["mark", str(plan_dir), "A-003", "--restore", "--recorded-by", "ben"])
    assert out.exit_code == 0, out.output
    assert read_events(plan_dir / "plan.gpkg")["user"].tolist()[-1] == "ben"
    out = runner.invoke(app, ["mark", str(plan_dir), "A-003", "--inaccessible"])
    assert out.exit_code == 2
    assert np.all(load_plan(plan_dir).points["status"].isin(["selected", "spare"]))


def test_check_warns_when_much_of_a_stratum_was_given_up(plan_dir, no_png):
    # common practice, no source: more than a fifth of a stratum given up deserves a warning.
    from fieldplan.field.mark import replacement_warnings

    assert replacement_warnings(load_plan(plan_dir)) == []
    mark_points(plan_dir, ["A-001", "A-002"], reason="waterlogged", now=NOW)
    lines = replacement_warnings(load_plan(plan_dir))
    n_a = int((load_plan(plan_dir).points.query("block == 'A'")["spare_rank"] == 0).sum())
    assert len(lines) == (1 if 2 / n_a > 0.2 else 0)
    assert replacement_warnings(load_plan(plan_dir), max_share=0.01)[0].startswith("stratum A: 2 of")


def test_substitution_notes_name_the_rule(plan_dir, no_png):
    # common practice, no source: an estimate says how the field departed from the plan.
    from fieldplan.field.mark import substitution_notes

    assert substitution_notes(load_plan(plan_dir)) == []
    mark_points(plan_dir, ["B-001"], reason="x", now=NOW)
    (line,) = substitution_notes(load_plan(plan_dir))
    assert line.startswith("stratum B: 1 point(s) marked inaccessible, 1 spare(s)")
    assert "draw order" in line


def test_check_command_warns_and_leaves_inaccessible_points_out(plan_dir, no_png):
    # common practice, no source: a point given up does not cover its block, and a stratum
    # with more than a fifth of its points given up is pointed out.
    from fieldplan.cli.main import app

    mark_points(plan_dir, ["A-001", "A-002", "A-003"], reason="waterlogged", now=NOW)
    out = CliRunner().invoke(app, ["check", str(plan_dir)])
    assert "warning: stratum A: 3 of" in out.output
    from fieldplan.check import coverage

    plan = load_plan(plan_dir)
    report = coverage(plan)
    assert "3 inaccessible" in report.source
    row = report.table.set_index("block").loc["A"]
    assert row["n_points"] == int(
        plan.points.query("block == 'A'")["status"].isin(["selected", "replacement"]).sum()
    )
