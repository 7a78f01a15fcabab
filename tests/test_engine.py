"""Engines: the Dask engine plans exactly what the in-process engine plans.

One local Dask cluster (two single-threaded worker processes on 127.0.0.1) is
shared by the module; its address is passed as a scheduler, so the
``--scheduler`` path is the one tested.
"""

from __future__ import annotations

import logging
import math

import numpy as np
import pandas as pd
import pytest

from benchmarks.workloads import estate
from fieldplan.design.grid import spacing_for_density
from fieldplan.engine import check_engine, dask_client, grid_origin, partition_keys, run_design
from fieldplan.errors import OptionError
from fieldplan.plan import sample_areas
from fieldplan.stratified import check_design_options

pytest.importorskip("dask_geopandas")
pytest.importorskip("distributed")


@pytest.fixture(scope="module")
def scheduler():
    logging.getLogger("distributed").setLevel(logging.ERROR)
    with dask_client(n_workers=2) as client:
        yield client.scheduler.address


@pytest.fixture(scope="module")
def farm():
    blocks = estate(200, seed=5)
    blocks["stratum"] = blocks["block"]
    return blocks


def _grid_params(start: str) -> dict:
    return {
        "seed": 3,
        "layout": "triangular",
        "spacing": spacing_for_density(2.0, "triangular"),
        "start": start,
        "angle": "rows",
        "max_points": 10_000_000,
    }


@pytest.mark.parametrize("start", ["field", "block"])
def test_grid_engines_agree_on_200_blocks(scheduler, farm, start):
    areas = sample_areas(farm, edge_buffer=5.0)
    params = _grid_params(start)
    local, local_flags = run_design("grid", farm, areas, params, None)
    remote, remote_flags = run_design(
        "grid", farm, areas, params, None, engine="dask", scheduler=scheduler, partitions=7
    )
    # common practice, no source: a parallel run must reproduce the serial run exactly
    pd.testing.assert_frame_equal(remote, local)
    assert remote_flags == local_flags
    assert len(local) > 1000


def test_stratified_engines_agree_with_strata_across_blocks(scheduler, farm):
    blocks = farm.copy()
    # Strata of several blocks each: partitions must keep a stratum whole.
    blocks["stratum"] = blocks["variety"].astype(str)
    areas = sample_areas(blocks)
    opts = check_design_options("random", {"per_ha": 0.5})
    params = {"seed": 9, "design_options": opts, "max_points": 10_000_000}
    local, local_flags = run_design("random", blocks, areas, params, None)
    remote, remote_flags = run_design(
        "random", blocks, areas, params, None, engine="dask", scheduler=scheduler, partitions=3
    )
    # common practice, no source: a parallel run must reproduce the serial run exactly
    pd.testing.assert_frame_equal(remote, local)
    pd.testing.assert_frame_equal(remote.attrs["strata"], local.attrs["strata"])
    assert remote_flags == local_flags


def test_partitions_never_split_a_stratum():
    frame = pd.DataFrame(
        {"block": [f"b{i}" for i in range(40)], "stratum": list("aaabbbbbcddddddeffffff") + ["g"] * 18}
    )
    keys = partition_keys("random", frame, 4)
    by_stratum = pd.Series(keys).groupby(frame["stratum"]).nunique()
    assert (by_stratum == 1).all()
    assert set(keys) <= {0, 1, 2, 3} and len(set(keys)) > 1
    # Grid partitions are contiguous runs of blocks of near-equal size.
    grid = partition_keys("grid", frame, 4)
    assert (np.diff(grid) >= 0).all() and np.bincount(grid).tolist() == [10, 10, 10, 10]


def test_grid_origin_is_the_farm_corner_rounded_down():
    # reference: systematic sampling with a random start (Cochran 1977, ch. 8): one lattice
    # for the whole field; its anchor is any lattice-aligned corner at or below the farm's
    assert grid_origin((1234.5, -20.0, 9999, 9999), 100.0) == (1200.0, -100.0)
    x, y = grid_origin((400_123.0, 5_300_456.0, 0, 0), 31.62)
    assert math.isclose(x % 31.62, 0, abs_tol=1e-6) or math.isclose(x % 31.62, 31.62, abs_tol=1e-6)
    assert x <= 400_123.0 < x + 31.62 and y <= 5_300_456.0 < y + 31.62


def test_engine_options_are_checked():
    with pytest.raises(OptionError, match="--engine must be one of"):
        check_engine("spark")
    with pytest.raises(OptionError, match="--scheduler applies to --engine dask only"):
        check_engine("local", "tcp://127.0.0.1:8786")
    assert check_engine("dask") == "dask"


def test_dask_benchmark_study_runs(scheduler):
    from benchmarks import bench_dask

    results = bench_dask.study(smoke=True, scheduler=scheduler)
    assert {r.name for r in results} and all(np.isfinite(r.ratio) and r.ratio > 0 for r in results)
    # common practice, no source: the engines' plans are compared inside the study
    assert all(r.details["identical_to_in_process"] for r in results)


def test_make_plan_same_plan_on_either_engine(scheduler, farm):
    from fieldplan.plan import make_plan

    blocks = farm.drop(columns="stratum")
    options = {"per_ha": 1.5, "layout": "square", "angle": 25.0, "edge_buffer": 3.0, "seed": 11}
    local = make_plan(blocks, command=["fieldplan"], **options)
    remote = make_plan(blocks, command=["fieldplan"], engine="dask", scheduler=scheduler, **options)
    # common practice, no source: a parallel run must reproduce the serial run exactly
    pd.testing.assert_frame_equal(remote.points, local.points)
    pd.testing.assert_frame_equal(remote.blocks, local.blocks)
    # The engine is recorded; everything else, the plan's code included, is the same.
    assert {k: v for k, v in remote.params.items() if k not in ("engine", "scheduler")} == {
        k: v for k, v in local.params.items() if k not in ("engine", "scheduler")
    }


def test_cli_refuses_an_unknown_engine(tmp_path):
    from typer.testing import CliRunner

    from fieldplan.cli.main import app

    path = tmp_path / "blocks.geojson"
    from benchmarks.workloads import write_geojson

    write_geojson(estate(3, seed=1), path)
    result = CliRunner().invoke(
        app, ["plan", str(path), "--per-ha", "1", "--engine", "spark", "--out", str(tmp_path / "p")]
    )
    assert result.exit_code == 2
    # The choice is checked while the options are parsed, listing the valid ones.
    assert "'spark' is not one of 'local', 'dask'" in " ".join(result.output.replace("│", " ").split())
    assert not (tmp_path / "p").exists()
