"""Actual sample positions against the plan: geodesic displacement, GPX waypoints."""

from __future__ import annotations

import math

import gpxpy
import gpxpy.gpx
import numpy as np
import pandas as pd
import pytest

from fieldplan.errors import InputError
from fieldplan.field.positions import (
    compare_positions,
    default_max_offset,
    displacement_m,
    positions_from_table,
    read_gpx_positions,
)

# reference: WGS84 defining parameters a = 6378137 m, 1/f = 298.257223563 (NIMA TR8350.2).
A = 6378137.0
F = 1 / 298.257223563
E2 = F * (2 - F)


def test_meridian_step_matches_radius_of_curvature():
    # reference: meridian radius of curvature M = a(1-e²)/(1-e² sin²φ)^(3/2) (Snyder 1987, Map
    # Projections: A Working Manual, USGS PP 1395; from memory); 0.001° of latitude at 45° is
    # M(45.0005°)·Δφ to well below 1 mm.
    phi = math.radians(45.0005)
    m = A * (1 - E2) / (1 - E2 * math.sin(phi) ** 2) ** 1.5
    expected = m * math.radians(0.001)
    got = displacement_m([10.0], [45.0], [10.0], [45.001])[0]
    assert abs(got - expected) < 0.01
    assert abs(expected - 111.132) < 0.01  # from memory: ~111.13 m per 0.001° at 45°


def test_equator_step_is_an_arc_of_radius_a():
    # reference: the WGS84 equator is a circle of radius a, so 0.001° of longitude is a·Δλ.
    got = displacement_m([0.0], [0.0], [0.001], [0.0])[0]
    assert abs(got - A * math.radians(0.001)) < 0.01


def test_default_offset_is_half_the_grid_spacing():
    # reference: nearest lattice neighbours are one spacing apart on square and triangular grids,
    # so half the spacing is the distance to the boundary of a point's Voronoi cell (geometry).
    assert default_max_offset({"design": "grid", "spacing_m": 40.0}) == 20.0
    assert default_max_offset({"design": "random"}) == 10.0


def test_compare_flags_beyond_max_offset():
    # reference: pyproj.Geod (Karney 2013) distances, compared with the hand formula above.
    planned = pd.DataFrame({"point_id": ["P1", "P2"], "lon": [10.0, 10.0], "lat": [45.0, 45.0]})
    actual = pd.DataFrame({"point_id": ["P1", "P2"], "lon": [10.0, 10.0], "lat": [45.00005, 45.0003]})
    out = compare_positions(planned, actual, max_offset=10.0)
    assert out["beyond_max_offset"].tolist() == [False, True]
    assert out["offset_m"].iloc[1] == pytest.approx(33.34, abs=0.01)  # 0.3 × 111.13 m
    with pytest.raises(InputError):
        compare_positions(planned, actual.assign(point_id=["P1", "ZZ"]), max_offset=10.0)


def test_gpx_waypoints_are_matched_by_name(tmp_path):
    # reference: GPX 1.1 schema (topografix.com/GPX/1/1): <wpt lat lon><name>; parsed with gpxpy.
    gpx = gpxpy.gpx.GPX()
    gpx.waypoints.append(gpxpy.gpx.GPXWaypoint(latitude=-33.9, longitude=18.85, name="B01-001"))
    gpx.waypoints.append(gpxpy.gpx.GPXWaypoint(latitude=-33.91, longitude=18.86, name="B01-002"))
    path = tmp_path / "taken.gpx"
    path.write_text(gpx.to_xml(), encoding="utf-8")
    frame = read_gpx_positions(path)
    assert frame["point_id"].tolist() == ["B01-001", "B01-002"]
    np.testing.assert_allclose(frame["lon"], [18.85, 18.86])
    np.testing.assert_allclose(frame["lat"], [-33.9, -33.91])
    bad = tmp_path / "bad.gpx"
    bad.write_text("<gpx><wpt lat='x'", encoding="utf-8")
    with pytest.raises(InputError):
        read_gpx_positions(bad)


def test_results_table_lon_lat_columns():
    # common practice, no source: longitude then latitude in decimal degrees (RFC 7946 order).
    table = pd.DataFrame({"point_id": ["a", "b"], "value": [1, 2], "Lon": [18.8, None], "Lat": [-33.9, None]})
    frame = positions_from_table(table)
    assert frame["lon"].iloc[0] == 18.8 and np.isnan(frame["lon"].iloc[1])
    assert positions_from_table(table[["point_id", "value"]]) is None
    with pytest.raises(InputError):
        positions_from_table(table.drop(columns="Lat"))
    with pytest.raises(InputError):
        positions_from_table(table.assign(Lat=[95.0, None]))


def test_position_report_uses_plan_points_and_default_limit():
    # reference: pyproj.Geod distances (Karney 2013); default limit half the grid spacing (above).
    import geopandas as gpd
    import shapely

    from fieldplan.field.positions import position_report

    pts = gpd.GeoDataFrame({"point_id": ["P1"]}, geometry=[shapely.Point(10.0, 45.0)], crs=4326)

    class _Plan:
        points = pts
        params = {"design": "grid", "spacing_m": 40.0}

    out = position_report(_Plan(), pd.DataFrame({"point_id": ["P1"], "lon": [10.0], "lat": [45.0002]}))
    assert out["offset_m"].iloc[0] == pytest.approx(22.23, abs=0.01)  # 0.2 × 111.13 m
    assert bool(out["beyond_max_offset"].iloc[0])


def test_positions_from_a_semicolon_results_csv(tmp_path):
    # common practice, no source: European spreadsheets save CSV with semicolons.
    from fieldplan.field.positions import positions_from_csv

    path = tmp_path / "r.csv"
    path.write_text("point_id;brix;lon;lat\nA-001;21.5;18.85;-33.9\nA-002;22.0;;\n", encoding="utf-8")
    frame = positions_from_csv(path)
    assert frame["point_id"].tolist() == ["A-001", "A-002"]
    assert frame["lon"].iloc[0] == 18.85 and np.isnan(frame["lat"].iloc[1])
    plain = tmp_path / "p.csv"
    plain.write_text("point_id,brix\nA-001,21.5\n", encoding="utf-8")
    assert positions_from_csv(plain) is None


def test_recorded_positions_are_stored_and_drawn(tmp_path, monkeypatch):
    # reference: pyproj.Geod (Karney 2013) for the offset; common practice, no source, that a
    # later round replaces a point's earlier position.
    import shapely

    from fieldplan.field.record import record_positions
    from fieldplan.plan import make_plan
    from fieldplan.store import load_plan, write_plan
    from fieldplan.write.tables import points_lonlat
    from tests.geoms import E0, N0, blocks_frame

    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1800000000")
    plan = make_plan(blocks_frame({"A": shapely.box(E0, N0, E0 + 120, N0 + 80)}), spacing=40, seed=1)
    folder = write_plan(plan, tmp_path / "p")
    lonlat = points_lonlat(plan.points)
    ids = plan.points["point_id"].tolist()
    taken = pd.DataFrame({"point_id": ids[:2], "lon": lonlat[:2, 0], "lat": lonlat[:2, 1] + [0.0, 0.0003]})
    report = record_positions(folder, taken, round_no=1)
    assert report["beyond_max_offset"].tolist() == [False, True]  # 0.0003° ≈ 33 m > 20 m
    again = pd.DataFrame({"point_id": [ids[1]], "lon": [lonlat[1, 0]], "lat": [lonlat[1, 1]]})
    record_positions(folder, again, round_no=2)
    stored = load_plan(folder).layers["actual"]
    assert sorted(stored["point_id"]) == sorted(ids[:2])
    assert stored.set_index("point_id").loc[ids[1], "offset_m"] == pytest.approx(0.0, abs=0.01)
    assert "Recorded position" in (folder / "map.html").read_text(encoding="utf-8")
    assert (folder / "positions.csv").read_text(encoding="utf-8").startswith("point_id,")


def test_results_command_flags_samples_taken_too_far(tmp_path, monkeypatch):
    # reference: pyproj.Geod (Karney 2013): 0.0003° of latitude ≈ 33 m, beyond half of a 40 m grid.
    import shapely
    from typer.testing import CliRunner

    from fieldplan.cli.main import app
    from fieldplan.plan import make_plan
    from fieldplan.store import load_plan, write_plan
    from fieldplan.write.tables import points_lonlat
    from tests.geoms import E0, N0, blocks_frame

    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1800000000")
    plan = make_plan(blocks_frame({"A": shapely.box(E0, N0, E0 + 120, N0 + 80)}), spacing=40, seed=1)
    folder = write_plan(plan, tmp_path / "p")
    lonlat = points_lonlat(plan.points)
    ids = plan.points["point_id"].tolist()
    lines = ["point_id,brix,lon,lat"] + [
        f"{ids[0]},21.5,{lonlat[0, 0]},{lonlat[0, 1]}",
        f"{ids[1]},22.5,{lonlat[1, 0]},{lonlat[1, 1] + 0.0003}",
    ]
    results = tmp_path / "r.csv"
    results.write_text("\n".join(lines) + "\n", encoding="utf-8")
    out = CliRunner().invoke(app, ["results", str(folder), str(results)])
    assert out.exit_code == 0, out.output
    assert "Positions: 2 recorded, 1 more than 20 m" in out.output
    assert f"point {ids[1]} was sampled 33." in out.output
    stored = load_plan(folder)
    assert (
        set(stored.layers["results"].columns).isdisjoint({"lon", "lat"})
        or "value" in stored.layers["results"]
    )
    assert len(stored.layers["actual"]) == 2
