"""make_plan and the plan folder: containment, buffers, exclusions, determinism, outputs."""

from __future__ import annotations

import json

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fieldplan.errors import DesignError, OptionError, OutputExistsError
from fieldplan.plan import make_plan
from fieldplan.store import load_plan, write_plan
from tests.geoms import E0, N0, UTM33N, blocks_frame, concave, multipart, tiny, with_hole


def _blocks():
    return blocks_frame(
        {
            "A": concave,
            "B": shapely.affinity.translate(with_hole, 700),
            "C": shapely.affinity.translate(multipart, 0, 600),
            "D": shapely.affinity.translate(tiny, 1400),
        },
        row_bearing_deg=[10.0, 95.0, np.nan, 0.0],
    )


def _inside_buffer(plan, buffer):
    merged = plan.points.merge(
        plan.blocks[["block", "geometry"]].rename(columns={"geometry": "bg"}), on="block"
    )
    allowed = shapely.buffer(merged["bg"].values, -buffer)
    return shapely.contains(allowed, merged.geometry.values)


def test_points_lie_in_their_block_minus_buffer_and_outside_exclusions():
    # reference: shapely (GEOS) containment is the geometry engine of record.
    blocks = _blocks()
    excl = gpd.GeoDataFrame(
        {"name": ["wet"]}, geometry=[shapely.Point(E0 + 250, N0 + 60).buffer(40)], crs=UTM33N
    )
    plan = make_plan(blocks, spacing=20, edge_buffer=6, exclusions=excl, seed=3)
    normal = plan.points["block"] != "D"
    assert _inside_buffer(plan, 6)[normal.to_numpy()].all()
    assert not shapely.intersects(plan.points.geometry.values, excl.geometry.iloc[0]).any()
    assert set(plan.points["block"]) == {"A", "B", "C", "D"}


def test_tiny_block_gets_one_flagged_point():
    # common practice, no source: every block in a plan gets at least one sample.
    plan = make_plan(_blocks(), spacing=40, edge_buffer=8, seed=1)
    d = plan.blocks.set_index("block").loc["D"]
    assert d["n_points"] == 1
    assert "edge buffer" in d["flags"] or "too small" in d["flags"]


def test_point_ids_unique_and_columns_present():
    plan = make_plan(_blocks(), spacing=25, seed=9)
    assert plan.points["point_id"].is_unique
    assert {"point_id", "block", "stratum", "design"} <= set(plan.points.columns)


def test_seed_determines_plan():
    a = make_plan(_blocks(), spacing=25, seed=9).points
    b = make_plan(_blocks(), spacing=25, seed=9).points
    c = make_plan(_blocks(), spacing=25, seed=10).points
    assert a.geometry.equals(b.geometry)
    assert not (len(a) == len(c) and a.geometry.geom_equals(c.geometry).all())


def test_block_draw_independent_of_other_blocks():
    # Per-block random streams: removing a block must not move another block's points.
    full = make_plan(_blocks(), spacing=25, seed=4, start="block").points
    part = make_plan(_blocks().iloc[[1]], spacing=25, seed=4, start="block").points
    b_full = full[full["block"] == "B"].geometry.reset_index(drop=True)
    assert b_full.geom_equals(part.geometry.reset_index(drop=True)).all()


def test_angle_rows_follows_row_bearing():
    # reference: lattice definition — with --angle rows the grid's first axis runs along the rows.
    big = shapely.box(E0, N0, E0 + 600, N0 + 600)
    blocks = blocks_frame({"R": big}, row_bearing_deg=[30.0])
    plan = make_plan(blocks, spacing=50, angle="rows", seed=2)
    xy = shapely.get_coordinates(plan.points.geometry.values)
    d = xy[1] - xy[0]
    bearing = np.degrees(np.arctan2(d[0], d[1])) % 180
    assert bearing == pytest.approx(30.0, abs=1e-6)


def test_contradicting_and_dense_options_refused():
    with pytest.raises(OptionError, match="not both"):
        make_plan(_blocks(), spacing=20, per_ha=3, seed=0)
    with pytest.raises(DesignError, match="about .* points"):
        make_plan(_blocks(), spacing=0.5, seed=0, max_points=10_000)


def test_folder_outputs_and_round_trip(tmp_path):
    # reference: RFC 7946 §3.1.1 — GeoJSON positions are [longitude, latitude] in WGS84.
    plan = make_plan(_blocks(), spacing=30, edge_buffer=5, seed=5)
    out = write_plan(plan, tmp_path / "plan")
    names = {p.name for p in out.iterdir()}
    assert {"points.geojson", "points.csv", "summary.csv", "manifest.json", "plan.gpkg"} <= names
    gj = gpd.read_file(out / "points.geojson")
    assert len(gj) == len(plan.points)
    lon, lat = gj.geometry.x.to_numpy(), gj.geometry.y.to_numpy()
    assert np.all((lon > 14) & (lon < 16) & (lat > 47) & (lat < 48.5))  # UTM 33N at 500 km E, 5300 km N
    back = gj.to_crs(plan.crs)
    assert np.max(shapely.distance(back.geometry.values, plan.points.geometry.values)) < 0.01
    csv = pd.read_csv(out / "points.csv")
    assert list(csv.columns[:9]) == ["point_id", "block", "stratum", "design", "lon", "lat", "x", "y", "crs"]
    summary = pd.read_csv(out / "summary.csv")
    assert list(summary.columns[:5]) == ["block", "area_ha", "sampled_area_ha", "n_points", "points_per_ha"]
    assert summary["n_points"].sum() == len(plan.points)
    manifest = json.loads((out / "manifest.json").read_text())
    assert manifest["seed"] == 5 and manifest["parameters"]["spacing_m"] == 30
    loaded = load_plan(out)
    assert loaded.points["point_id"].tolist() == plan.points["point_id"].tolist()
    assert loaded.params["seed"] == 5


def test_geopackage_lists_layers_in_gpkg_contents(tmp_path):
    # reference: OGC GeoPackage 1.3 — gpkg_contents lists every feature and attribute table.
    import sqlite3

    out = write_plan(make_plan(_blocks(), spacing=30, seed=5), tmp_path / "plan")
    with sqlite3.connect(out / "plan.gpkg") as con:
        names = {r[0] for r in con.execute("select table_name from gpkg_contents")}
    assert {"blocks", "points", "exclusions", "plan_info"} <= names


def test_byte_identical_outputs(tmp_path, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1790000000")
    a = write_plan(make_plan(_blocks(), spacing=30, seed=5, command=["x"]), tmp_path / "a")
    b = write_plan(make_plan(_blocks(), spacing=30, seed=5, command=["x"]), tmp_path / "b")
    for name in ("points.geojson", "points.csv", "summary.csv", "manifest.json"):
        assert (a / name).read_bytes() == (b / name).read_bytes(), name


def test_refuses_non_empty_folder_without_force(tmp_path):
    plan = make_plan(_blocks(), spacing=30, seed=5)
    out = tmp_path / "plan"
    write_plan(plan, out)
    before = (out / "points.geojson").read_bytes()
    with pytest.raises(OutputExistsError, match="--force"):
        write_plan(make_plan(_blocks(), spacing=30, seed=6), out)
    assert (out / "points.geojson").read_bytes() == before
    write_plan(make_plan(_blocks(), spacing=30, seed=6), out, force=True)
    assert (out / "points.geojson").read_bytes() != before
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    seed=st.integers(0, 2**31),
    buffer=st.floats(0, 15),
    spacing=st.floats(12, 45),
    layout=st.sampled_from(["square", "triangular"]),
    start=st.sampled_from(["field", "block"]),
)
def test_property_points_inside_buffered_blocks(seed, buffer, spacing, layout, start):
    # reference: shapely (GEOS) containment; exact count bookkeeping of the plan.
    blocks = _blocks().iloc[:3]
    plan = make_plan(blocks, spacing=spacing, edge_buffer=buffer, layout=layout, start=start, seed=seed)
    assert _inside_buffer(plan, buffer - 1e-6).all()
    assert plan.blocks["n_points"].sum() == len(plan.points)
    again = make_plan(blocks, spacing=spacing, edge_buffer=buffer, layout=layout, start=start, seed=seed)
    assert plan.points.geometry.geom_equals(again.points.geometry).all()


def test_reloaded_plan_writes_the_same_files(tmp_path):
    # A plan read back from plan.gpkg must reproduce every file the original wrote.
    from fieldplan.demo import make_demo_plan

    plan = make_demo_plan()
    write_plan(plan, tmp_path / "a")
    write_plan(load_plan(tmp_path / "a"), tmp_path / "b")
    for name in ("points.geojson", "points.csv", "summary.csv", "map.html", "points.kml", "points.gpx"):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes(), name


def test_grid_progress_moves_batch_by_batch_and_points_do_not_depend_on_batches(monkeypatch):
    # common practice, no source: a long plan reports progress as it goes; batching is an
    # implementation detail and must not change a single point.
    import fieldplan.planning.grid as plan_module

    squares = {f"B{i:02d}": shapely.box(E0 + 120 * i, N0, E0 + 120 * i + 100, N0 + 100) for i in range(7)}
    blocks = blocks_frame(squares)
    whole = make_plan(blocks, spacing=20, seed=3)
    calls = []
    monkeypatch.setattr(plan_module, "_GRID_BATCH", 3)
    batched = make_plan(blocks, spacing=20, seed=3, progress=lambda done, total: calls.append((done, total)))
    assert calls == [(3, 7), (6, 7), (7, 7)]
    assert whole.points["point_id"].tolist() == batched.points["point_id"].tolist()
    np.testing.assert_array_equal(
        shapely.get_coordinates(whole.points.geometry.values),
        shapely.get_coordinates(batched.points.geometry.values),
    )


@pytest.mark.parametrize("edge_buffer", [0.0, 5.0])
def test_block_covered_by_exclusions_gets_no_grid_point(edge_buffer):
    # common practice, no source: an excluded area (hazard, wet spot, no-go zone) is never a
    # sampling point, even for a block the grid would otherwise give one fallback point.
    square = shapely.box(E0, N0, E0 + 40, N0 + 40)
    other = shapely.box(E0 + 200, N0, E0 + 300, N0 + 100)
    blocks = blocks_frame({"A": square, "B": other})
    cover = gpd.GeoDataFrame({"name": ["wet"]}, geometry=[square.centroid.buffer(29.0)], crs=UTM33N)
    plan = make_plan(blocks, exclusions=cover, spacing=12.0, edge_buffer=edge_buffer, seed=0)
    flags = dict(zip(plan.blocks["block"], plan.blocks["flags"], strict=True))
    assert flags["A"] == "exclusions cover the block: not sampled"
    assert (plan.points["block"] == "A").sum() == 0
    assert (plan.points["block"] == "B").sum() > 0
