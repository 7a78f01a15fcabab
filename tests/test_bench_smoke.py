"""Benchmarks on tiny sizes, so the studies keep running; no timing is asserted here.

The 5-million-plant draw without a plant-sized array is checked in
tests/test_clusters.py (test_five_million_plants_without_a_plant_sized_array).
"""

from __future__ import annotations

import json
import math

import numpy as np
import shapely

from benchmarks import bench_clusters, bench_grid, bench_plan, bench_random, run
from benchmarks.workloads import estate, write_geojson


def test_workload_blocks_are_valid_irregular_and_sized(tmp_path):
    blocks = estate(60, seed=4)
    geoms = blocks.geometry.values
    area_ha = shapely.area(geoms) / 10_000.0
    # reference: shapely.is_valid (OGC simple features validity)
    assert shapely.is_valid(geoms).all()
    assert area_ha.min() >= 0.5 - 1e-6 and area_ha.max() <= 50.0 + 1e-6
    assert (shapely.get_num_interior_rings(geoms) > 0).any()
    assert (blocks.geom_type == "MultiPolygon").any()
    # reference: shapely STRtree query; blocks of an estate do not overlap
    left, right = blocks.sindex.query(geoms, predicate="intersects")
    assert (left == right).all()
    assert blocks.crs.to_epsg() == 32633 and blocks["row_bearing_deg"].between(0, 180).all()
    # Same seed, same estate.
    assert estate(60, seed=4).geometry.equals(blocks.geometry)
    path = write_geojson(blocks.head(5), tmp_path / "blocks.geojson")
    assert json.loads(path.read_text())["type"] == "FeatureCollection"


def test_naive_grid_baseline_finds_the_same_points():
    poly = estate(3, seed=2).geometry.values[0]
    from fieldplan.design.grid import grid_points

    ours = grid_points(poly, 25.0, origin=(400_000.0, 5_300_000.0), offset=(0.2, 0.7))
    naive = bench_grid.naive_grid(poly, 25.0, origin=(400_000.0, 5_300_000.0), offset=(0.2, 0.7))
    # reference: shapely Polygon.contains, one point at a time
    assert np.array_equal(np.unique(ours.round(6), axis=0), np.unique(naive.round(6), axis=0))


def test_study_functions_run_on_tiny_sizes():
    results = [
        *bench_grid.study(smoke=True),
        *bench_random.study(smoke=True),
        *bench_clusters.study(smoke=True),
        *bench_plan.study_scaling(smoke=True),
    ]
    for r in results:
        assert math.isfinite(r.ratio) and r.target > 0 and r.better in ("higher", "lower")
        # A fitted exponent can come out below zero on tiny sizes, where fixed costs dominate.
        assert r.unit == "k" or r.ratio > 0
    by_study = {r.study: r for r in results}
    # reference: shapely Polygon.contains; baseline and fieldplan agree point for point
    assert by_study["grid"].details["same_points"]
    # reference: shapely.contains_xy and geopandas GeoSeries.sample_points counts
    assert by_study["random"].details["all_inside"] and by_study["random"].details["geopandas_counts_match"]
    assert by_study["clusters"].details["picks_inside_blocks"]


def test_run_writes_table_with_targets(tmp_path):
    assert run.main(["--smoke", "--only", "grid", "plan", "--out", str(tmp_path)]) == 0
    text = (tmp_path / "results.md").read_text()
    data = json.loads((tmp_path / "results.json").read_text())
    assert "| study | measure | ratio | target | result |" in text
    assert {r["study"] for r in data["results"]} == {"grid", "plan"}
    for r in data["results"]:
        assert isinstance(r["passed"], bool) and r["target"] > 0
        assert r["name"] in text


def test_map_study_runs_on_a_tiny_plan():
    from benchmarks import bench_map

    size, timing = bench_map.study(smoke=True)
    assert size.unit == "KB" and 0 < size.ratio and size.target == 400.0
    assert math.isfinite(timing.ratio) and timing.ratio > 0 and timing.target == 1.5
    # reference: the former hand-written writer (benchmarks/baseline_map.py) carries the same data document
    assert timing.details["same_data"]
