"""``fieldplan crews`` and ``fieldplan schedule`` on a small plan of the demo estate."""

from __future__ import annotations

import shutil
from datetime import date
from pathlib import Path

import gpxpy
import icalendar
import numpy as np
import pytest
from typer.testing import CliRunner

from fieldplan.cli.main import app
from fieldplan.demo import demo_blocks_path
from fieldplan.route.sheets import CrewSheet, crew_sheets_html
from fieldplan.safety import CAUTIONS
from fieldplan.store import load_plan

runner = CliRunner()
START = "18.8905,-33.8620"  # inside the demo estate's bounding box


@pytest.fixture(scope="module")
def small_plan(tmp_path_factory) -> Path:
    out = tmp_path_factory.mktemp("routes") / "plan"
    args = ["plan", str(demo_blocks_path()), "--spacing", "80", "--seed", "3", "--out", str(out)]
    result = runner.invoke(app, args)
    assert result.exit_code == 0, result.output
    return out


@pytest.fixture
def plan_dir(small_plan, tmp_path) -> Path:
    copy = tmp_path / "plan"
    shutil.copytree(small_plan, copy)
    return copy


def test_crews_writes_everything(plan_dir):
    result = runner.invoke(app, ["crews", str(plan_dir), "--crews", "3", "--drop-off", START, "--return"])
    assert result.exit_code == 0, result.output
    plan = load_plan(plan_dir)
    pts = plan.points
    # every point assigned exactly once, visit orders 1..n within each crew
    assert set(pts["crew"].unique()) == {1, 2, 3}
    for _, group in pts.groupby("crew"):
        assert sorted(group["visit_order"]) == list(range(1, len(group) + 1))
    routes = plan.layers["routes"]
    assert sorted(routes["crew"]) == [1, 2, 3]
    assert set(routes.geometry.geom_type) == {"LineString"}
    table = (plan_dir / "crews.csv").read_text().splitlines()
    assert table[0] == "crew,n_points,length_km,hours" and len(table) == 4
    assert sum(int(line.split(",")[1]) for line in table[1:]) == len(pts)
    # longest crew within 15 % of the mean (common practice, no source)
    hours = np.array([float(line.split(",")[3]) for line in table[1:]])
    assert hours.max() <= 1.15 * hours.mean()
    for k in (1, 2, 3):
        text = (plan_dir / f"crew_{k:02d}.gpx").read_text(encoding="utf-8")
        gpx = gpxpy.parse(text)  # reference: gpxpy (PyPI) GPX parser
        # reference: GPX 1.1 schema, version attribute and wpt/rte elements
        assert gpx.version == "1.1"
        mine = pts[pts["crew"] == k].sort_values("visit_order")
        assert [w.name for w in gpx.waypoints] == mine["point_id"].tolist()
        assert len(gpx.routes) == 1
        # route: drop-off, every point, back to the drop-off
        assert len(gpx.routes[0].points) == len(mine) + 2
        lon, lat = (float(v) for v in START.split(","))
        first = gpx.routes[0].points[0]
        assert first.longitude == pytest.approx(lon, abs=1e-6)
        assert first.latitude == pytest.approx(lat, abs=1e-6)
    sheets = (plan_dir / "crew_sheets.html").read_text(encoding="utf-8")
    assert sheets.count('<section class="crew"') == 3
    assert "page-break-after: always" in sheets and sheets.count("<svg") == 3
    assert all(sheets.count(c.replace("'", "&#x27;")) == 3 for c in CAUTIONS)
    assert "<script" not in sheets
    assert not list(plan_dir.glob(".*tmp*"))
    # map.html refreshed with the routes drawn (one toggle per crew)
    from fieldplan.write.html_map import map_data

    assert len(map_data(plan)["routes"]["features"]) == 3


def test_crews_refuses_rerun_without_force_and_is_deterministic(plan_dir, tmp_path):
    other = tmp_path / "again"
    shutil.copytree(plan_dir, other)
    args = ["crews", str(plan_dir), "--crews", "2"]
    assert runner.invoke(app, args).exit_code == 0
    again = runner.invoke(app, args)
    assert again.exit_code == 2 and "--force" in again.output
    assert runner.invoke(app, [*args, "--force"]).exit_code == 0
    assert runner.invoke(app, ["crews", str(other), "--crews", "2"]).exit_code == 0
    for name in ("crews.csv", "crew_01.gpx", "crew_02.gpx", "crew_sheets.html", "points.csv"):
        assert (plan_dir / name).read_bytes() == (other / name).read_bytes(), name


def test_crews_max_hours_and_option_errors(plan_dir):
    result = runner.invoke(
        app, ["crews", str(plan_dir), "--crews", "2", "--max-hours", "1", "--minutes-per-point", "10"]
    )
    assert result.exit_code == 0, result.output
    assert "do not fit" in result.output
    left = (plan_dir / "crews_unfitted.csv").read_text().splitlines()
    pts = load_plan(plan_dir).points
    assert left[0] == "point_id,block"
    assert len(left) - 1 == int((pts["crew"] == 0).sum()) > 0
    bad = runner.invoke(app, ["crews", str(plan_dir), "--crews", "0", "--force"])
    assert bad.exit_code == 2 and "--crews" in bad.output and "Traceback" not in bad.output


def test_crews_return_without_start_uses_blocks_centroid(plan_dir):
    import shapely
    from pyproj import Transformer

    result = runner.invoke(app, ["crews", str(plan_dir), "--crews", "2", "--return"])
    assert result.exit_code == 0, result.output
    assert "Drop-off:" in result.output and "centroid" in result.output
    plan = load_plan(plan_dir)
    # reference: shapely.centroid of shapely.union_all (GEOS), the documented default drop-off
    centre = shapely.centroid(shapely.union_all(plan.blocks.geometry.values))
    for line in plan.layers["routes"].geometry:
        xy = shapely.get_coordinates(line)
        assert xy[0] == pytest.approx([centre.x, centre.y], abs=1e-6)
        assert xy[-1] == pytest.approx([centre.x, centre.y], abs=1e-6)
    # the printed LON,LAT is the same point; reference: pyproj.Transformer
    lon, lat = Transformer.from_crs(plan.crs, "EPSG:4326", always_xy=True).transform(centre.x, centre.y)
    assert f"{lon:.6f},{lat:.6f}" in result.output


def test_schedule_ics(plan_dir, tmp_path):
    blocks = tmp_path / "blocks.csv"
    blocks.write_text("block,probability,due\nV01,0.9,\nF01,,2026-03-20\n", encoding="utf-8")
    args = [
        "schedule",
        str(plan_dir),
        "--crews",
        "2",
        "--hours-per-day",
        "6",
        "--days",
        "mon-fri",
        "--start",
        "2026-03-02",
        "--until",
        "2026-04-30",
        "--every",
        "14d",
        "--blocks",
        str(blocks),
    ]
    result = runner.invoke(app, args)
    assert result.exit_code == 0, result.output
    cal = icalendar.Calendar.from_ical((plan_dir / "schedule.ics").read_bytes())
    events = list(cal.walk("VEVENT"))
    assert events
    for ev in events:
        start, end = ev.decoded("dtstart"), ev.decoded("dtend")
        assert start.weekday() < 5  # Mon-Fri only
        assert (end - start).total_seconds() <= 6 * 3600  # no crew-day over its hours
        assert date(2026, 3, 2) <= start.date() <= date(2026, 4, 30)
    assert runner.invoke(app, args).exit_code == 2  # refuses to replace without --force
    assert runner.invoke(app, [*args, "--force"]).exit_code == 0
    rows = (plan_dir / "schedule.csv").read_text().splitlines()
    assert rows[0] == "date,crew,block,round,hours,start,end"


def test_crew_sheet_escapes_input_text():
    evil = '<img src=x onerror="alert(1)">'
    sheet = CrewSheet(
        crew=1,
        route_xy=np.zeros((0, 2)),
        points_xy=np.zeros((1, 2)),
        rows=[{"point_id": evil, "block": "&"}],
        summary=evil,
    )
    page = crew_sheets_html(
        [sheet], title=evil, columns=["point_id", "block"], cautions=[evil], blocks=[(evil, None)]
    )
    assert "<img" not in page and "&lt;img src=x" in page and "&amp;" in page


def test_spares_and_inaccessible_points_get_no_crew(plan_dir):
    from fieldplan.route.folder import plan_crews

    plan = load_plan(plan_dir)
    plan.points["status"] = "selected"
    plan.points.loc[plan.points.index[:2], "status"] = ["spare", "inaccessible"]
    run = plan_crews(plan, n_crews=2, kicks=0)
    crew = run.plan.points["crew"].to_numpy()
    assert crew[:2].tolist() == [0, 0] and np.all(crew[2:] > 0)
    assert run.table["n_points"].sum() == len(crew) - 2


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (["crews", "{dir}", "--crews", "2", "--drop-off", "200,1"], "longitude"),
        (["schedule", "{dir}", "--first-day", "2026-13-01"], "YYYY-MM-DD"),
        (["schedule", "{dir}", "--first-day", "2026-03-02", "--every", "7x"], "7d"),
        (["schedule", "{dir}", "--first-day", "2026-03-02", "--days", "someday"], "mon-fri"),
    ],
)
def test_bad_options_one_line_exit_2(plan_dir, args, needle):
    result = runner.invoke(app, [a.replace("{dir}", str(plan_dir)) for a in args])
    assert result.exit_code == 2 and needle in result.output
    assert "Traceback" not in result.output


def test_drop_off_far_from_every_block_is_refused(plan_dir):
    # reference: pyproj.Geod (WGS84) distances; 50 km is the limit the tool sets (common
    # practice, no source: crews drive to the blocks, a far drop-off is a typing slip).
    from pyproj import Geod

    geod = Geod(ellps="WGS84")
    lonlat = load_plan(plan_dir).blocks.to_crs(4326).get_coordinates()
    lost = runner.invoke(app, ["crews", str(plan_dir), "--crews", "2", "--drop-off", "18.8905,33.8620"])
    assert lost.exit_code == 2 and "Traceback" not in lost.output
    assert "did you mean --drop-off 18.8905,-33.862?" in lost.output
    x, y = lonlat.x.to_numpy(), lonlat.y.to_numpy()
    _, _, d = geod.inv(np.full(len(x), 18.8905), np.full(len(x), 33.862), x, y)
    assert f"is {d.min() / 1000:,.0f} km from the nearest block" in lost.output
    assert not (plan_dir / "crews.csv").exists()
    west = lonlat.iloc[int(np.argmin(x))]
    for km, ok in ((45, True), (55, False)):
        lon, lat, _ = geod.fwd(west.x, west.y, 270.0, km * 1000.0)
        result = runner.invoke(
            app, ["crews", str(plan_dir), "--crews", "2", "--drop-off", f"{lon},{lat}", "--force"]
        )
        assert (result.exit_code == 0) == ok, result.output


def test_max_hours_names_the_blocks_left_part_sampled(plan_dir):
    # common practice, no source: dropping the far end of a route samples the part of a block
    # nearer the drop-off, so the user is told which blocks are incomplete and why it matters.
    args = ["crews", str(plan_dir), "--crews", "2", "--max-hours", "1.5", "--drop-off", START]
    result = runner.invoke(app, args)
    assert result.exit_code == 0, result.output
    pts = load_plan(plan_dir).points
    left = pts[pts["crew"] == 0].groupby("block").size()
    total = pts.groupby("block").size()
    assert len(left) > 0 and "part-sampled" in result.output and "toward the drop-off" in result.output
    for block, k in left.items():
        assert f"{block}: {k} of {total[block]} point(s) not visited" in result.output
    for block in set(total.index) - set(left.index):
        assert f"{block}: " not in result.output


@pytest.mark.parametrize(("k", "hours"), [(2, None), (3, None), (4, "6")])
def test_each_block_is_sampled_by_one_crew(plan_dir, k, hours):
    # common practice, no source: one crew per block (one drive, one set of hands per block),
    # as long as the days stay balanced (longest crew within 15 % of the mean, as above) or,
    # with --max-hours, the block fits in the day.
    args = ["crews", str(plan_dir), "--crews", str(k), "--drop-off", START, "--return"]
    result = runner.invoke(app, args + (["--max-hours", hours] if hours else []))
    assert result.exit_code == 0, result.output
    pts = load_plan(plan_dir).points
    assert (pts["crew"] > 0).all()
    assert (pts.groupby("block")["crew"].nunique() == 1).all()
    table = (plan_dir / "crews.csv").read_text().splitlines()
    crew_hours = np.array([float(line.split(",")[3]) for line in table[1:]])
    if hours is None:
        assert crew_hours.max() <= 1.15 * crew_hours.mean()
    else:
        assert crew_hours.max() <= float(hours)


def test_after_mark_the_replacement_keeps_the_crew_and_the_advice_runs_as_printed(tmp_path):
    # common practice, no source: crews already in the field keep their assignments; the point
    # brought in goes to the crew that would have sampled the point it replaces, in its place.
    import shlex

    out = tmp_path / "spares"
    args = ["plan", str(demo_blocks_path()), "--design", "random", "--per-block", "4", "--spares", "2"]
    assert runner.invoke(app, [*args, "--seed", "3", "--out", str(out), "-q"]).exit_code == 0
    crews = ["crews", str(out), "--crews", "3", "--drop-off", START, "--return", "--max-hours", "9"]
    assert runner.invoke(app, crews).exit_code == 0
    before = load_plan(out).points.set_index("point_id")
    gone = before.index[(before["block"] == "V01") & (before["status"] == "selected")][1]
    result = runner.invoke(app, ["mark", str(out), gone.lower(), "--inaccessible", "--reason", "gate locked"])
    assert result.exit_code == 0, result.output
    after = load_plan(out).points.set_index("point_id")
    came = after.index[after["status"] == "replacement"].item()
    assert after.loc[came, "crew"] == before.loc[gone, "crew"] > 0
    assert after.loc[came, "visit_order"] == before.loc[gone, "visit_order"]
    assert after.loc[gone, "crew"] == 0
    others = after.index[after["status"] == "selected"]
    assert (after.loc[others, "crew"] == before.loc[others, "crew"]).all()
    assert f"{came} joins crew {before.loc[gone, 'crew']}" in result.output
    printed = result.output.split("same options: ")[1].splitlines()[0]
    command = shlex.split(printed)
    assert command[:2] == ["fieldplan", "crews"] and "--max-hours" in command and "--force" in command
    rerun = runner.invoke(app, command[1:])
    assert rerun.exit_code == 0, rerun.output
    pts = load_plan(out).points
    assert (
        pts.loc[pts["point_id"] == came, "crew"].item() > 0
        and pts.loc[pts["point_id"] == gone, "crew"].item() == 0
    )
