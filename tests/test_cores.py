"""Soil cores: every composite keeps N cores, all inside the block minus buffers; zone cores span the zone."""

from __future__ import annotations

import json
import math

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

from fieldplan.errors import DesignError, OptionError
from fieldplan.plan import make_plan
from fieldplan.samples.cores import (
    CELL_HA,
    CORES_RANGE,
    DEFAULT_BUFFER_M,
    DEFAULT_CORES,
    DEFAULT_DEPTH_CM,
    disc_composites,
    disc_composites_many,
    disc_cores,
    long_axis,
    sunflower_offsets,
    usable_core_area,
    usable_core_areas,
    zigzag_cores,
)
from fieldplan.samples.outputs import write_cores_geojson
from fieldplan.samples.purpose import apply_purpose, parse_depth
from fieldplan.store import load_plan, write_plan
from tests.geoms import E0, N0, UTM33N, blocks_frame, concave, multipart, square, with_hole

# Features to keep away from: a manure heap and an old fence line crossing the square.
HEAP = shapely.Point(E0 + 120, N0 + 150).buffer(6)
FENCE = shapely.LineString([(E0 + 250, N0 - 10), (E0 + 260, N0 + 310)])
EXCLUSIONS = np.array([HEAP, FENCE], dtype=object)
TOL = 1e-6


def _clearance(xy: np.ndarray, block, exclusions) -> tuple[np.ndarray, np.ndarray]:
    """Distance of each point to the block's boundary and to the nearest exclusion."""
    pts = shapely.points(xy)
    to_edge = shapely.distance(pts, shapely.boundary(block))
    to_excl = np.min([shapely.distance(pts, g) for g in exclusions], axis=0) if len(exclusions) else np.inf
    return to_edge, to_excl


def test_trade_defaults():
    # common practice, no source (values from memory): 15-20 cores per composite,
    # 0-15 cm for routine fertility, ~30 m from edges and heaps, ~1 ha (2.5 acre) cells.
    assert CORES_RANGE == (15, 20) and 15 <= DEFAULT_CORES <= 20
    assert DEFAULT_DEPTH_CM == (0, 15)
    assert DEFAULT_BUFFER_M == 30.0
    # reference: international acre = 4046.8564224 m² (NIST Handbook 44, appendix C).
    assert CELL_HA * 10_000 / 4046.8564224 == pytest.approx(2.471, abs=1e-3)


@pytest.mark.parametrize("n", [15, 16, 20])
@pytest.mark.parametrize("seed", range(4))
def test_cell_cores_keep_count_and_clearance(n, seed):
    # Centres on a 100 m grid (about 1 ha cells), including spots inside the
    # buffer strip and next to the heap, so re-drawing and moving are exercised.
    block = square
    area, used = usable_core_area(block, EXCLUSIONS, buffer_m=30)
    assert used == 30
    gx, gy = np.meshgrid(np.arange(E0 + 5, E0 + 400, 50), np.arange(N0 + 5, N0 + 300, 50))
    centres = np.column_stack([gx.ravel(), gy.ravel()])
    xy, moved = disc_cores(centres, n=n, radius=12, area=area, rng=np.random.default_rng(seed))
    assert xy.shape == (len(centres), n, 2)
    flat = xy.reshape(-1, 2)
    to_edge, to_excl = _clearance(flat, block, EXCLUSIONS)
    # reference: shapely (GEOS) distances; 30 m rule is common practice, no source.
    assert shapely.contains_xy(block, flat[:, 0], flat[:, 1]).all()
    assert (to_edge >= 30 - TOL).all()
    assert (to_excl >= 30 - TOL).all()
    assert moved.sum() < 0.05 * flat.shape[0]


def test_cell_cores_stay_within_radius_of_an_inside_centre():
    area, _ = usable_core_area(square, None, buffer_m=30)
    centres = np.array([[E0 + 200, N0 + 150], [E0 + 100, N0 + 100]])
    xy, moved = disc_cores(centres, n=16, radius=10, area=area, rng=np.random.default_rng(1))
    dist = np.hypot(*(xy - centres[:, None, :]).transpose(2, 0, 1))
    assert (dist <= 10 + TOL).all() and not moved.any()
    # Distinct cores: a composite of 16 copies of one spot would be one core.
    assert len(np.unique(np.round(xy.reshape(-1, 2), 6), axis=0)) == 32


def test_sunflower_pattern_is_equal_area():
    # reference: Vogel, "A better way to construct the sunflower head",
    # Math. Biosci. 44 (1979) 179-189 (from memory): r_k = sqrt(k + 1/2) scaled,
    # angle k * golden angle, so each point stands for an equal share of the disc.
    n = 400
    off = sunflower_offsets(n, [0.3])[0]
    r = np.hypot(off[:, 0], off[:, 1])
    assert r.max() <= 1.0
    for share in (0.25, 0.5, 0.75):
        inside = np.mean(r <= math.sqrt(share))
        assert inside == pytest.approx(share, abs=1.5 / n)
    # Golden-angle spacing: no two neighbours closer than about sqrt(area per point).
    from scipy.spatial import cKDTree

    d, _ = cKDTree(off).query(off, k=2)
    assert d[:, 1].min() > 0.5 * math.sqrt(math.pi / n)


@pytest.mark.parametrize(
    "zone", [square, concave, with_hole, multipart], ids=["square", "concave", "hole", "multi"]
)
@pytest.mark.parametrize("seed", range(3))
def test_zone_cores_span_the_long_axis(zone, seed):
    n = 16
    xy = zigzag_cores(zone, n=n, rng=np.random.default_rng(seed))
    assert xy.shape == (n, 2)
    assert shapely.contains_xy(zone, xy[:, 0], xy[:, 1]).all()
    # The hull of the cores must reach across most of the zone along its long
    # axis (minimum rotated rectangle): stated share 75 %.
    # reference: shapely.oriented_envelope (GEOS minimum rotated rectangle).
    hull = shapely.convex_hull(shapely.multipoints(xy))
    centre, u, length, _ = long_axis(zone)
    along = (shapely.get_coordinates(hull) - centre) @ u
    assert (along.max() - along.min()) / length >= 0.75


@pytest.mark.parametrize("seed", range(3))
def test_zone_cores_with_buffers_span_the_allowed_area(seed):
    area, used = usable_core_area(square, EXCLUSIONS, buffer_m=30)
    xy = zigzag_cores(square, n=20, area=area, rng=np.random.default_rng(seed))
    to_edge, to_excl = _clearance(xy, square, EXCLUSIONS)
    assert len(xy) == 20
    assert (to_edge >= 30 - TOL).all() and (to_excl >= 30 - TOL).all()
    centre, u, _, _ = long_axis(square)
    allowed = (shapely.get_coordinates(area) - centre) @ u
    along = (xy - centre) @ u
    assert (along.max() - along.min()) / (allowed.max() - allowed.min()) >= 0.75


def test_small_block_cuts_the_buffer_and_says_so():
    small = shapely.box(E0, N0, E0 + 50, N0 + 40)
    area, used = usable_core_area(small, None, buffer_m=30)
    assert used < 30 and shapely.area(area) > 0
    xy, _ = disc_cores(
        np.array([[E0 + 25, N0 + 20]]), n=15, radius=10, area=area, rng=np.random.default_rng(0)
    )
    to_edge, _ = _clearance(xy[0], small, [])
    assert (to_edge >= used - TOL).all()


def test_ten_thousand_composites_in_one_call():
    # Speed is measured in benchmarks/, never asserted here.
    area, _ = usable_core_area(shapely.box(0, 0, 10_000, 10_000), None, buffer_m=30)
    g = np.arange(0, 10_000, 100.0)
    centres = np.column_stack([np.repeat(g, len(g)), np.tile(g, len(g))])
    xy, _ = disc_cores(centres, n=16, radius=10, area=area, rng=np.random.default_rng(0))
    assert xy.shape == (10_000, 16, 2)
    # common practice, no source: the cores of a composite lie within its radius of the point
    # (points at least buffer + radius inside the field; nearer the edge the disc moves in)
    inner = ((centres >= 40.0) & (centres <= 10_000 - 40.0)).all(axis=1)
    dist = np.hypot(*(xy[inner] - centres[inner][:, None, :]).transpose(2, 0, 1))
    assert inner.sum() > 9_000 and dist.max() <= 10.0 + 1e-9


def test_depth_and_option_checks():
    assert parse_depth("0-15") == "0-15" and parse_depth(" 15 - 30 ") == "15-30"
    # common practice, no source: soil depths are written "0-15 cm", often without the space
    for text in ("0-15cm", "0-15 cm", "0cm-15cm", " 0 – 15 CM "):
        assert parse_depth(text) == "0-15"
    for bad in ("15", "15-0", "a-b", "0-15in", "0-15mm", "0-15 m"):
        with pytest.raises(OptionError, match="--depth"):
            parse_depth(bad)
    with pytest.raises(OptionError):
        sunflower_offsets(0, [0.0])


def _plan(seed=5):
    blocks = blocks_frame({"A": square, "B": shapely.affinity.translate(concave, 600)})
    excl = gpd.GeoDataFrame({"name": ["heap"]}, geometry=[HEAP], crs=UTM33N)
    return make_plan(blocks, spacing=100, exclusions=excl, seed=seed)


def test_apply_purpose_soil_cells_and_zones(tmp_path):
    base = _plan()
    plan = apply_purpose(base, purpose="soil", cores=18, core_radius=12)
    cores = plan.layers["cores"]
    counts = cores.groupby("sample_id").size()
    assert (counts == 18).all() and set(counts.index) == set(plan.points["sample_id"])
    assert (plan.points["depth_cm"] == "0-15").all() and (plan.points["purpose"] == "soil").all()
    for block, geom in zip(plan.blocks["block"], plan.blocks.geometry, strict=True):
        xy = shapely.get_coordinates(cores[cores["block"] == block].geometry.values)
        to_edge, to_excl = _clearance(xy, geom, [HEAP])
        assert (to_edge >= 30 - TOL).all() and (to_excl >= 30 - TOL).all()

    zone = apply_purpose(base, purpose="soil", composite="zone", cores=15)
    zc = zone.layers["cores"]
    assert zc["sample_id"].nunique() == len(base.blocks)
    assert (zc.groupby("sample_id").size() == 15).all()
    # Every point of a block shares the block's composite id.
    assert (zone.points.groupby("block")["sample_id"].nunique() == 1).all()

    # Same inputs and seed, same cores; written cores.geojson is RFC 7946 lon/lat.
    again = apply_purpose(_plan(), purpose="soil", cores=18, core_radius=12)
    assert shapely.equals(again.layers["cores"].geometry.values, cores.geometry.values).all()
    write_cores_geojson(plan, tmp_path)
    data = json.loads((tmp_path / "cores.geojson").read_text())
    assert len(data["features"]) == len(cores)
    lon, lat = data["features"][0]["geometry"]["coordinates"]
    assert 14.0 < lon < 16.0 and 47.0 < lat < 48.5  # UTM 33N, 500 km E, 5300 km N
    assert data["features"][0]["properties"]["sample_id"] == cores["sample_id"].iloc[0]


def test_cores_layer_survives_the_plan_folder(tmp_path):
    plan = apply_purpose(_plan(), purpose="soil")
    write_plan(plan, tmp_path / "p")
    back = load_plan(tmp_path / "p")
    assert "cores" in back.layers and len(back.layers["cores"]) == len(plan.layers["cores"])
    assert list(back.points["sample_id"]) == list(plan.points["sample_id"])


def test_soil_options_refused_for_other_purposes():
    with pytest.raises(OptionError, match="only apply to --purpose soil"):
        apply_purpose(_plan(), purpose="ripeness", cores=16)
    with pytest.raises(OptionError, match="--purpose"):
        apply_purpose(_plan(), purpose="tissue")


def test_cli_soil_plan_writes_cores(tmp_path):
    from typer.testing import CliRunner

    from fieldplan.cli.main import app
    from fieldplan.demo import demo_blocks_path, demo_exclusions_path

    runner = CliRunner()
    args = ["plan", str(demo_blocks_path()), "--exclude", str(demo_exclusions_path()), "--spacing", "100"]
    soil = [*args, "--purpose", "soil", "--composite", "block", "--cores", "20", "--depth", "0-20"]
    result = runner.invoke(app, [*soil, "--seed", "1", "--out", str(tmp_path / "z"), "-q"])
    assert result.exit_code == 0, result.output
    data = json.loads((tmp_path / "z" / "cores.geojson").read_text())
    props = [f["properties"] for f in data["features"]]
    blocks = {p["block"] for p in props}
    assert len(props) == 20 * len(blocks) and {p["depth_cm"] for p in props} == {"0-20"}
    result = runner.invoke(
        app, [*args, "--purpose", "soil", "--composite", "ring", "--out", str(tmp_path / "r")]
    )
    # The choice is checked while parsing, listing the valid ones.
    assert result.exit_code == 2 and "'ring' is not one of 'cell', 'block'" in result.output
    result = runner.invoke(app, [*args, "--purpose", "ripeness", "--out", str(tmp_path / "g"), "-q"])
    assert result.exit_code == 0 and not (tmp_path / "g" / "cores.geojson").exists()


def test_block_cores_do_not_depend_on_block_order():
    # Each block draws from its own stream (fieldplan.rng.stream(seed, "cores", block)).
    a, b = square, shapely.affinity.translate(concave, 600)
    one = apply_purpose(make_plan(blocks_frame({"A": a, "B": b}), spacing=100, seed=9), purpose="soil")
    two = apply_purpose(make_plan(blocks_frame({"B": b, "A": a}), spacing=100, seed=9), purpose="soil")
    for block in ("A", "B"):
        c1 = one.layers["cores"][one.layers["cores"]["block"] == block]
        c2 = two.layers["cores"][two.layers["cores"]["block"] == block]
        assert shapely.equals(c1.geometry.values, c2.geometry.values).all()


def _geodesic_core_distances(folder):
    """Distance of every core from its point, both read back from the written GeoJSON (WGS84)."""
    from pyproj import Geod

    points = gpd.read_file(folder / "points.geojson")
    cores = gpd.read_file(folder / "cores.geojson")
    at = points.set_index("point_id").geometry
    own = at.loc[cores["point_id"]].to_numpy()
    _, _, dist = Geod(ellps="WGS84").inv(
        cores.geometry.x.to_numpy(), cores.geometry.y.to_numpy(), shapely.get_x(own), shapely.get_y(own)
    )
    return cores, points, dist


def test_cores_stay_within_the_radius_of_the_point_the_crew_walks_to(tmp_path):
    # reference: pyproj.Geod (WGS84 ellipsoid) distances between the written lon/lat of every
    # core and of its point; 0.1 % covers the UTM scale factor near the central meridian
    # (0.9996-1.0010, from memory) and GeoJSON rounding.
    narrow = shapely.Polygon(
        [(E0, N0), (E0 + 420, N0 + 30), (E0 + 400, N0 + 260), (E0 + 220, N0 + 110), (E0 + 20, N0 + 240)]
    )
    blocks = blocks_frame({"A": square, "B": shapely.affinity.translate(narrow, 600)})
    excl = gpd.GeoDataFrame({"name": ["heap"]}, geometry=[HEAP], crs=UTM33N)
    general = make_plan(blocks, spacing=60, exclusions=excl, seed=11)
    plan = make_plan(blocks, spacing=60, exclusions=excl, seed=11, samples={"purpose": "soil"})
    write_plan(plan, tmp_path / "p")
    cores, points, dist = _geodesic_core_distances(tmp_path / "p")
    assert len(cores) == 16 * len(points)
    assert dist.max() <= 10.0 * 1.001
    # The plan points nearer the edge than the 30 m core buffer moved in, with their cores.
    moved = points["moved_m"].to_numpy(float) > 0
    assert moved.mean() > 0.2
    from pyproj import Geod

    before = general.points.to_crs(4326).geometry
    _, _, shift = Geod(ellps="WGS84").inv(before.x, before.y, points.geometry.x, points.geometry.y)
    np.testing.assert_allclose(shift, points["moved_m"].to_numpy(float), rtol=2e-3, atol=0.02)
    # Every point the crew walks to lies in the allowed core area (reference: shapely/GEOS distance).
    local = plan.points.geometry.values
    for block, geom in zip(plan.blocks["block"], plan.blocks.geometry, strict=True):
        mine = plan.points["block"].to_numpy() == block
        to_edge, to_excl = _clearance(shapely.get_coordinates(local[mine]), geom, [HEAP])
        assert (to_edge >= 30 - TOL).all() and (to_excl >= 30 - TOL).all()
    # Every moved point is named in summary.csv, with how far it moved.
    summary = pd.read_csv(tmp_path / "p" / "summary.csv", keep_default_na=False)
    flags = " ".join(summary["flags"])
    for pid, metres in zip(points["point_id"][moved], points["moved_m"][moved], strict=True):
        assert f"{pid} {metres:.1f} m" in flags
    # And the GPX waypoint is the moved point (reference: gpxpy parser, GPX 1.1).
    import gpxpy

    gpx = gpxpy.parse((tmp_path / "p" / "points.gpx").read_text(encoding="utf-8"))
    way = {w.name: (w.longitude, w.latitude) for w in gpx.waypoints}
    for pid, geom in zip(points["point_id"], points.geometry, strict=True):
        lon, lat = way[pid]
        assert abs(lon - geom.x) < 1e-6 and abs(lat - geom.y) < 1e-6


def test_cores_pressed_against_an_exclusion_stay_in_their_disc():
    # reference: shapely/GEOS distances in the metric frame: a core moved to the nearest allowed
    # spot is taken from the allowed part of its own disc, never further than the radius.
    area = shapely.box(0, 0, 200, 200).difference(shapely.box(95, -10, 105, 210))
    centres = np.column_stack([np.full(200, 100.0 + 6.0), np.linspace(5, 195, 200)])
    out = disc_composites(centres, n=16, radius=10, area=area, rng=np.random.default_rng(3))
    dist = np.hypot(*(out.xy - out.centres[:, None, :]).transpose(2, 0, 1))
    assert dist.max() <= 10.0 + 1e-9
    flat = out.xy.reshape(-1, 2)
    assert shapely.contains_xy(area, flat[:, 0], flat[:, 1]).all()
    assert (out.shift_m == 0).all()
    # centres in the strip move half a radius (and a 0.25 m inset) inside, and say how far:
    # from x = 99 to the nearer side x = 95, then 5.25 m further
    strip = np.column_stack([np.full(5, 99.0), np.linspace(20, 180, 5)])
    out = disc_composites(strip, n=16, radius=10, area=area, rng=np.random.default_rng(4))
    assert np.allclose(out.shift_m, 9.25, atol=1e-6)
    assert np.hypot(*(out.xy - out.centres[:, None, :]).transpose(2, 0, 1)).max() <= 10.0 + 1e-9


def test_substitute_gets_its_own_cores_and_the_old_ones_are_retired(tmp_path, monkeypatch):
    # reference: pyproj.Geod distances of the written cores from the substitute's written point;
    # common practice, no source: a composite is taken around the spot actually sampled.
    from fieldplan.field.mark import mark_points

    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1800000000")
    blocks = blocks_frame({"A": square, "B": shapely.affinity.translate(concave, 600)})
    soil = {"purpose": "soil", "core_radius": 12, "cores": 15}
    plan = make_plan(blocks, spacing=100, seed=5, substitute="within-cell", samples=soil)
    folder = write_plan(plan, tmp_path / "p")
    planned = (folder / "cores.geojson").read_bytes()
    edge = plan.points.loc[plan.points["moved_m"] > 0, "point_id"].iloc[0]
    inner = plan.points.loc[plan.points["moved_m"] == 0, "point_id"].iloc[0]
    mark_points(folder, [edge.lower(), inner], reason="flooded")
    cores, points, dist = _geodesic_core_distances(folder)
    assert dist.max() <= 12.0 * 1.001
    for pid in (edge, inner):
        sub = pid + "-S"
        assert (cores.loc[cores["point_id"] == pid, "status"] == "retired").sum() == 15
        mine = cores[cores["point_id"] == sub]
        assert len(mine) == 15 and (mine["status"] == "active").all()
        assert mine["core_id"].str.contains("-S").all() and mine["core_id"].is_unique
        assert points.loc[points["point_id"] == sub, "status"].item() == "substitute"
    assert cores["core_id"].is_unique
    assert (cores["status"] == "active").sum() == 15 * int(
        points["status"].isin(["selected", "substitute"]).sum()
    )
    back = load_plan(folder)
    assert len(back.layers["cores"]) == len(cores)
    mark_points(folder, [edge, inner], action="restore")
    assert (folder / "cores.geojson").read_bytes() == planned


def _many_blocks():
    """Blocks of every kind the buffers treat differently: roomy, too small for 30 m, heaped, holed."""
    return np.array(
        [
            square,
            shapely.box(E0, N0 + 800, E0 + 61, N0 + 861),  # room only at 15 m
            shapely.box(E0, N0 + 400, E0 + 40, N0 + 430),  # room only at 7.5 m or less
            shapely.affinity.translate(concave, 600),
            shapely.affinity.translate(with_hole, 0, -600),
            shapely.affinity.translate(multipart, 1200),
            shapely.box(E0, N0 - 180, E0 + 400, N0 - 118),  # a strip under 2 m wide left at 30 m
        ],
        dtype=object,
    )


@pytest.mark.parametrize("buffer_m", [0.0, 12.0, 30.0])
def test_core_areas_of_many_blocks_are_those_of_each_block(buffer_m):
    # reference: shapely.to_wkb of usable_core_area on each block alone (the same GEOS operations,
    # one geometry at a time): the one-pass areas and fallback buffers match to the bit.
    blocks = _many_blocks()
    excl = np.concatenate([EXCLUSIONS, [shapely.Point(E0 + 620, N0 + 40).buffer(8)]])
    areas, used, failed = usable_core_areas(blocks, excl, buffer_m=buffer_m)
    assert failed == -1
    for k, block in enumerate(blocks):
        near = excl[shapely.dwithin(excl, block, 1.01 * buffer_m + 1.0)]
        area, buf = usable_core_area(block, near, buffer_m=buffer_m)
        assert used[k] == buf
        assert shapely.to_wkb(areas[k]) == shapely.to_wkb(area)
    if buffer_m == 30.0:
        assert used[1] == 15.0 and used[2] < 15.0  # the small blocks fall back, the others keep 30 m
        assert (used[[0, 3, 4, 5, 6]] == 30.0).all()


def test_core_areas_name_the_first_block_without_room():
    # reference: usable_core_area raises for a block covered by an exclusion
    blocks = np.array([square, shapely.box(E0, N0 + 400, E0 + 40, N0 + 430), square], dtype=object)
    cover = np.array([shapely.box(E0 - 5, N0 + 395, E0 + 45, N0 + 435)], dtype=object)
    _, _, failed = usable_core_areas(blocks, cover, buffer_m=30)
    assert failed == 1
    with pytest.raises(DesignError):
        usable_core_area(blocks[1], cover, buffer_m=30)


def test_cores_of_many_blocks_are_those_of_each_block():
    # reference: disc_composites on each block alone with its own generator: drawing all
    # blocks in one pass gives the same cores, moves and centres to the bit, also for
    # centres in the buffer strip and cores re-drawn or moved within their disc.
    blocks = _many_blocks()
    areas, _, _ = usable_core_areas(blocks, EXCLUSIONS, buffer_m=30)
    centres, block_of = [], []
    for k, block in enumerate(blocks):
        # Points of a 23 m grid inside the block (many in its buffer strip); none in block 2.
        x0, y0, x1, y1 = shapely.bounds(block)
        gx, gy = np.meshgrid(np.arange(x0 + 3, x1, 23.0), np.arange(y0 + 2, y1, 23.0))
        grid = np.column_stack([gx.ravel(), gy.ravel()])
        xy = grid[shapely.contains_xy(block, grid[:, 0], grid[:, 1])] if k != 2 else np.empty((0, 2))
        centres.append(xy)
        block_of.append(np.full(len(xy), k))
    seeds = [np.random.SeedSequence(100 + k) for k in range(len(blocks))]
    out = disc_composites_many(
        np.concatenate(centres),
        np.concatenate(block_of),
        areas,
        [np.random.default_rng(s) for s in seeds],
        n=16,
        radius=25,
    )
    assert out.moved.any() and (out.shift_m > 0).any()  # the hard cases are exercised
    at = 0
    for k in range(len(blocks)):
        one = disc_composites(centres[k], n=16, radius=25, area=areas[k], rng=np.random.default_rng(seeds[k]))
        part = slice(at, at + len(centres[k]))
        at += len(centres[k])
        assert np.array_equal(out.xy[part], one.xy)
        assert np.array_equal(out.moved[part], one.moved)
        assert np.array_equal(out.centres[part], one.centres)
        assert np.array_equal(out.shift_m[part], one.shift_m)
