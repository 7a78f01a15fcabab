"""fieldplan check: gaps, proportional share, misplaced points, exit codes."""

from __future__ import annotations

import csv
import json
import math

import geopandas as gpd
import numpy as np
import pytest
import shapely
from scipy.spatial import cKDTree
from typer.testing import CliRunner

from fieldplan.check import coverage, max_gap
from fieldplan.cli.main import app
from fieldplan.plan import make_plan
from fieldplan.read import read_blocks
from fieldplan.store import write_plan
from tests.geoms import lonlat_estate_file


@pytest.fixture(scope="module")
def plan(tmp_path_factory):
    folder = tmp_path_factory.mktemp("estate")
    path = lonlat_estate_file(folder / "blocks.geojson", [("A1", "Syrah", 0.0025), ("=1+1", "Syrah", 0.0015)])
    blocks = read_blocks(path)
    exclusions = gpd.GeoDataFrame(
        {"name": ["wet spot"]},
        geometry=[shapely.buffer(shapely.centroid(blocks.geometry.values[0]), 15.0)],
        crs=blocks.crs,
    )
    return make_plan(blocks, spacing=30.0, seed=2, exclusions=exclusions, command=["test"])


@pytest.fixture
def plan_dir(plan, tmp_path):
    return write_plan(plan, tmp_path / "plan")


def _lattice(s: float, offset, bearing_deg: float, half: float) -> np.ndarray:
    k = np.arange(-math.ceil(half / s) - 2, math.ceil(half / s) + 3)
    gx, gy = np.meshgrid(k * s + offset[0], k * s + offset[1])
    xy = np.c_[gx.ravel(), gy.ravel()]
    t = math.radians(bearing_deg)
    rot = np.array([[math.cos(t), math.sin(t)], [-math.sin(t), math.cos(t)]])
    return xy @ rot.T


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_gap_of_a_square_lattice_is_half_its_diagonal(seed):
    rng = np.random.default_rng(seed)
    s = float(rng.uniform(10, 50))
    xy = _lattice(s, rng.uniform(0, s, 2), float(rng.uniform(0, 90)), 8 * s)
    area = shapely.Polygon([(-3 * s, -2 * s), (4 * s, -3 * s), (3 * s, 3 * s), (-2 * s, 4 * s)])
    # reference: covering radius of the square lattice of spacing s is s*sqrt(2)/2
    # (Conway & Sloane, Sphere Packings, Lattices and Groups, ch. 2, lattice Z^2; from memory)
    assert max_gap(area, xy) == pytest.approx(s * math.sqrt(2) / 2, rel=0.02)


def test_gap_agrees_with_a_brute_force_lattice_scan():
    rng = np.random.default_rng(7)
    area = shapely.difference(shapely.box(0, 0, 120, 80), shapely.box(40, 20, 70, 50))
    xy = rng.uniform((0, 0), (120, 80), size=(25, 2))
    xy = xy[shapely.contains_xy(area, xy[:, 0], xy[:, 1])]
    h = 0.1
    gx, gy = np.meshgrid(np.arange(0, 120 + h / 2, h), np.arange(0, 80 + h / 2, h))
    spots = np.c_[gx.ravel(), gy.ravel()]
    spots = spots[shapely.intersects_xy(area, spots[:, 0], spots[:, 1])]
    # reference: scipy.spatial.cKDTree nearest-neighbour distances on a 0.1 m lattice
    brute = cKDTree(xy).query(spots)[0].max()
    assert max_gap(area, xy) == pytest.approx(brute, abs=h)
    assert max_gap(area, xy) >= brute - 1e-9


def test_gap_edge_cases():
    square = shapely.box(0, 0, 10, 10)
    # reference: distance from (0,0) to the far corner (10,10) is 10*sqrt(2) (Pythagoras)
    assert max_gap(square, [[0.0, 0.0]]) == pytest.approx(10 * math.sqrt(2), rel=1e-9)
    assert max_gap(square, np.empty((0, 2))) == math.inf
    assert math.isnan(max_gap(shapely.Polygon(), [[0.0, 0.0]]))
    # Collinear points have no Voronoi vertex; the boundary still bounds the gap.
    line = np.c_[np.arange(1.0, 10.0, 2.0), np.full(5, 5.0)]
    assert max_gap(square, line) == pytest.approx(math.hypot(1, 5), rel=1e-6)


def test_untouched_plan_passes(plan_dir):
    result = CliRunner().invoke(app, ["check", str(plan_dir), "--min-per-block", "1"])
    assert result.exit_code == 0, result.output
    assert "checked plan.gpkg" in result.output
    rows = list(csv.DictReader((plan_dir / "coverage.csv").open()))
    assert [r["block"] for r in rows] == ["'=1+1", "A1"]  # reference: OWASP CSV Injection
    assert all(r["status"] == "pass" and r["outside"] == "0" for r in rows)
    # reference: spacing s grid covers its area with gaps of at least s*sqrt(2)/2
    assert all(float(r["max_gap_m"]) >= 30 * math.sqrt(2) / 2 - 1e-6 for r in rows)


def test_hand_moved_point_outside_its_block_is_reported(plan, plan_dir):
    path = plan_dir / "points.geojson"
    data = json.loads(path.read_text())
    moved = data["features"][0]
    moved["geometry"]["coordinates"][1] -= 0.01  # about 1.1 km south
    path.write_text(json.dumps(data))
    result = CliRunner().invoke(app, ["check", str(plan_dir)])
    assert result.exit_code == 1
    assert "checked points.geojson" in result.output and "1 moved" in result.output
    pid = moved["properties"]["point_id"]
    assert f"point {pid} (block {moved['properties']['block']}) lies outside its block" in (result.output)
    rows = {r["block"].lstrip("'"): r for r in csv.DictReader((plan_dir / "coverage.csv").open())}
    assert rows[moved["properties"]["block"]]["outside"] == "1"
    assert rows[moved["properties"]["block"]]["status"] == "fail"


def test_point_in_exclusion_and_min_per_block(plan):
    points = plan.points.copy()
    centre = shapely.centroid(plan.exclusions.geometry.values[0])
    home = plan.blocks["block"][shapely.contains(plan.blocks.geometry.values, centre)].iloc[0]
    i = int(np.flatnonzero(points["block"] == home)[0])
    points.loc[points.index[i], "geometry"] = centre
    report = coverage(plan, points=points, min_per_block=10_000)
    row = report.table.set_index("block").loc[home]
    assert row["in_exclusion"] == 1 and row["outside"] == 0
    assert any("in an exclusion" in f for f in report.failures)
    assert any("--min-per-block 10000" in f for f in report.failures)
    assert report.problems["problem"].tolist() == ["lies in an exclusion"]


def test_unsampled_block_fails_and_share_is_flagged(plan):
    small = plan.blocks["block"].iloc[0]
    keep = plan.points[plan.points["block"] != small]
    report = coverage(plan, points=keep)
    row = report.table.set_index("block").loc[small]
    assert row["n_points"] == 0 and row["status"] == "fail" and "not sampled" in row["notes"]
    # reference: proportional allocation n_h = n * A_h / A (Cochran 1977, section 5.3)
    other = report.table.set_index("block").drop(small)
    assert other["expected_points"].iloc[0] == pytest.approx(
        len(keep) * other["sampled_area_ha"].iloc[0] / report.table["sampled_area_ha"].sum(),
        abs=0.01,
    )
    assert "by area share" in other["notes"].iloc[0]
    assert other["status"].iloc[0] == "pass"
    strict = coverage(plan, points=keep, proportional=True)
    assert strict.table.set_index("block").drop(small)["status"].iloc[0] == "fail"


def test_max_gap_rule(plan_dir):
    result = CliRunner().invoke(app, ["check", str(plan_dir), "--max-gap", "5"])
    assert result.exit_code == 1
    assert "> --max-gap 5 m" in result.output
    bad = CliRunner().invoke(app, ["check", str(plan_dir), "--max-gap", "-1"])
    assert bad.exit_code == 2


def test_spare_points_do_not_count_as_coverage(plan):
    points = plan.points.copy()
    points["status"] = "selected"
    first = plan.blocks["block"].iloc[0]
    points.loc[points["block"] == first, "status"] = "spare"
    report = coverage(plan, points=points, source="checked plan.gpkg")
    row = report.table.set_index("block").loc[first]
    # common practice, no source: spares stand in only for planned points found inaccessible
    assert row["n_points"] == 0 and "not sampled" in row["notes"]
    assert "spare points left out" in report.source


def test_unknown_block_and_duplicate_ids_are_reported(plan):
    points = plan.points.copy()
    points.loc[points.index[0], "block"] = "ZZ"
    points.loc[points.index[2], "point_id"] = points["point_id"].iloc[1]
    report = coverage(plan, points=points)
    problems = report.problems.set_index("problem")
    # common practice, no source: every sample has one id and belongs to a known block
    assert problems.loc["names a block that is not in the plan", "block"] == "ZZ"
    assert len(problems.loc["shares its point_id with another point"]) == 2
    assert not report.ok and any("not in the plan" in f for f in report.failures)
