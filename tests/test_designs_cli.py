"""The random, balanced and clusters designs through ``fieldplan plan``, and ``fieldplan size``."""

from __future__ import annotations

import json
import math

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from shapely.geometry import LineString
from typer.testing import CliRunner

from fieldplan.cli.main import app
from fieldplan.demo import demo_blocks_path
from fieldplan.plan import make_plan
from fieldplan.read import read_blocks

runner = CliRunner()


@pytest.fixture(scope="module")
def blocks():
    return read_blocks(demo_blocks_path())


def _plan(tmp_path, name, *args):
    out = tmp_path / name
    result = runner.invoke(
        app, ["plan", str(demo_blocks_path()), *args, "--seed", "7", "-q", "--out", str(out)]
    )
    assert result.exit_code == 0, result.output
    points = pd.read_csv(out / "points.csv", keep_default_na=False)
    summary = pd.read_csv(out / "summary.csv", keep_default_na=False)
    return out, points, summary


def _inside_own_block(points, blocks):
    geoms = blocks.set_index("block").geometry.loc[points["block"]].to_numpy()
    # reference: shapely (GEOS) point-in-polygon, with a millimetre for rounded CSV coordinates
    return shapely.dwithin(geoms, shapely.points(points["x"], points["y"]), 0.002)


def test_random_per_block(tmp_path, blocks):
    _, points, summary = _plan(tmp_path, "r", "--design", "random", "--per-block", "4")
    assert (points.groupby("block").size() == 4).all() and len(points) == 4 * len(blocks)
    assert _inside_own_block(points, blocks).all()
    assert set(points["design"]) == {"random"}
    assert (summary["n_allocated"] == 4).all() and (summary["n_target_exact"] == 4).all()


def test_balanced_total_allocated_in_proportion_to_area(tmp_path, blocks):
    _, points, summary = _plan(
        tmp_path, "b", "--design", "balanced", "--n", "60", "--allocation", "proportional",
        "--min-per-stratum", "0",
    )  # fmt: skip
    assert len(points) == 60 and summary["n_allocated"].sum() == 60
    area = summary["sampled_area_ha"].to_numpy()
    # reference: Cochran (1977) section 5.3, proportional allocation n_h = n N_h / N (N_h = area)
    np.testing.assert_allclose(summary["n_target_exact"], 60 * area / area.sum(), atol=2e-4)
    assert np.all(np.abs(summary["n_allocated"] - summary["n_target_exact"]) < 1)
    assert _inside_own_block(points, blocks).all()


def test_clusters_target_units(tmp_path, blocks):
    _, points, summary = _plan(
        tmp_path, "c", "--design", "clusters", "--target-units", "30", "--plants-per-cluster", "4",
        "--skip-row-ends", "2", "--skip-border-rows", "1", "--edge-buffer", "3",
    )  # fmt: skip
    with_rows = blocks.loc[blocks["row_spacing_m"].notna(), "block"]
    per_block = points.groupby("block").size()
    # common practice, no source: ceil(30 / 4) = 8 clusters, units 4,4,...,2 summing to 30
    assert (per_block.reindex(with_rows) == math.ceil(30 / 4)).all()
    assert (points.groupby("block")["units"].sum() == 30).all()
    assert sorted(points.loc[points["block"] == "V01", "units"]) == [2] + [4] * 7
    assert (points["row"] >= 1).all() and (points["plant"] >= 1).all()
    assert points["instructions"].str.contains("row").all()
    assert not points.duplicated(["block", "row", "plant"]).any()
    assert _inside_own_block(points, blocks).all()
    arable = summary.set_index("block").loc[["F01", "F02"]]
    assert (arable["n_points"] == 0).all() and arable["flags"].str.contains("plant_spacing").all()


def test_clusters_old_option_name_is_a_hidden_alias(tmp_path):
    args = ["--design", "clusters", "--target-units", "12", "--skip-row-ends", "2"]
    _, new, _ = _plan(tmp_path, "new", *args, "--plants-per-cluster", "4")
    _, old, _ = _plan(tmp_path, "old", *args, "--units-per-cluster", "4")
    # common practice, no source: a renamed option keeps working for one release and gives the same plan
    pd.testing.assert_frame_equal(new, old)
    helptext = runner.invoke(app, ["plan", "--help"], env={"COLUMNS": "200"}).output
    assert "--plants-per-cluster" in helptext and "--units-per-cluster" not in helptext
    both = runner.invoke(app, ["plan", str(demo_blocks_path()), *args, "--plants-per-cluster", "4",
                               "--units-per-cluster", "5", "-q", "--out", str(tmp_path / "both")])
    assert both.exit_code == 2 and "--plants-per-cluster" in both.output


def test_clusters_from_mapped_rows(tmp_path, blocks):
    v01 = blocks.set_index("block").geometry.loc["V01"]
    minx, miny, maxx, maxy = v01.bounds
    lines = [LineString([(x, miny - 5), (x, maxy + 5)]) for x in np.arange(minx + 1.5, maxx, 3.0)]
    rows = gpd.GeoDataFrame(geometry=lines, crs=blocks.crs).to_crs("EPSG:4326")
    path = tmp_path / "rows.geojson"
    rows.to_file(path, driver="GeoJSON")
    _, points, _ = _plan(tmp_path, "m", "--design", "clusters", "--per-block", "6", "--rows", str(path))
    assert set(points["block"]) == {"V01"} and len(points) == 6
    mapped = shapely.union_all(np.asarray(lines, dtype=object))
    # reference: shapely distance; every pick lies on one of the mapped lines (CSV keeps mm)
    assert np.all(shapely.distance(shapely.points(points["x"], points["y"]), mapped) < 0.002)
    # Rows are numbered in file order among the lines that cross the block.
    crossing = shapely.intersects(np.asarray(lines, dtype=object), v01)
    xs = np.asarray([ln.coords[0][0] for ln in lines])[crossing]
    row_x = xs[points["row"].to_numpy() - 1]
    np.testing.assert_allclose(points["x"], row_x, atol=0.002)


def test_strata_by_field_samples_union_and_keeps_block(tmp_path, blocks):
    _, points, summary = _plan(tmp_path, "s", "--design", "random", "--per-ha", "2", "--strata-by", "variety")
    syrah = summary[summary["stratum"] == "Syrah"]
    assert len(syrah) == 3 and syrah["n_allocated"].nunique() == 1
    expected = math.floor(2 * syrah["sampled_area_ha"].sum() + 0.5)  # n_h = round(D * area)
    assert int(syrah["n_allocated"].iloc[0]) == expected
    assert (points["stratum"] == "Syrah").sum() == expected
    assert set(points.loc[points["stratum"] == "Syrah", "block"]) <= {"V01", "V02", "V09"}
    assert _inside_own_block(points, blocks).all()


def test_same_seed_same_files_and_order_independent(tmp_path, blocks, monkeypatch):
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1700000000")
    a, _, _ = _plan(tmp_path, "d1", "--design", "balanced", "--per-block", "3")
    b, _, _ = _plan(tmp_path, "d2", "--design", "balanced", "--per-block", "3")
    assert (a / "points.csv").read_bytes() == (b / "points.csv").read_bytes()
    # One generator per stratum: a block's points do not depend on the other blocks.
    full = make_plan(blocks, design="random", design_options={"per_block": 3}, seed=5)
    part = make_plan(blocks.iloc[[7, 3]], design="random", design_options={"per_block": 3}, seed=5)
    for name in blocks["block"].iloc[[7, 3]]:
        g1 = full.points.loc[full.points["block"] == name].geometry.get_coordinates()
        g2 = part.points.loc[part.points["block"] == name].geometry.get_coordinates()
        np.testing.assert_array_equal(g1.to_numpy(), g2.to_numpy())


@pytest.mark.parametrize(
    "args",
    [
        ["--design", "random"],
        ["--design", "random", "--per-block", "3", "--n", "10"],
        ["--design", "grid", "--per-block", "3"],
        ["--design", "balanced", "--n", "20", "--allocation", "neyman"],
        ["--design", "random", "--per-block", "2", "--skip-row-ends", "2"],
        ["--design", "random", "--n", "20", "--strata-by", "no_such_field"],
    ],
)
def test_bad_design_options_exit_2(tmp_path, args):
    result = runner.invoke(app, ["plan", str(demo_blocks_path()), *args, "--out", str(tmp_path / "x")])
    assert result.exit_code == 2
    assert "error" in result.output and "Traceback" not in result.output


def test_size_command():
    result = runner.invoke(app, ["size", "--cv", "25", "--margin", "10", "--normal"])
    assert result.exit_code == 0, result.output
    # reference: Cochran (1977) ch. 4: n0 = (1.96 * 25 / 10)^2 = 24.01 -> 25 (hand computation)
    assert "Result: 25 samples" in result.output
    result = runner.invoke(
        app,
        ["size", "--sd", "3", "--margin-abs", "0.5", "--population", "500", "--plants-per-cluster", "5",
         "--icc", "0.1", "--json"],
    )  # fmt: skip
    data = json.loads(result.output)
    # reference: Kish (1965) deff = 1 + (m - 1) rho = 1.4; clusters = ceil(n * deff / m)
    assert data["deff"] == pytest.approx(1.4)
    assert data["clusters"] == math.ceil(data["n"] * 1.4 / 5)
    bad = runner.invoke(app, ["size", "--cv", "25"])
    assert bad.exit_code == 2


def test_neyman_and_optimal_allocation_from_block_fields(blocks):
    b = blocks.copy()
    rng = np.random.default_rng(3)
    b["brix_sd"] = rng.uniform(0.5, 2.0, len(b))
    b["cost"] = rng.uniform(1.0, 4.0, len(b))
    area = shapely.area(b.geometry.values) / 10_000.0
    opts = {"n": 50, "sd_field": "brix_sd", "min_per_stratum": 0}
    ney = make_plan(b, design="random", design_options={**opts, "allocation": "neyman"}, seed=1)
    w = area * b["brix_sd"].to_numpy()
    # reference: Cochran (1977) section 5.5, Neyman allocation n_h = n N_h S_h / sum N_h S_h
    np.testing.assert_allclose(ney.blocks["n_target_exact"], 50 * w / w.sum(), atol=1e-4)
    opt = make_plan(
        b, design="random", design_options={**opts, "allocation": "optimal", "cost_field": "cost"}, seed=1
    )
    w = area * b["brix_sd"].to_numpy() / np.sqrt(b["cost"].to_numpy())
    # reference: Cochran (1977) section 5.5, n_h proportional to N_h S_h / sqrt(c_h)
    np.testing.assert_allclose(opt.blocks["n_target_exact"], 50 * w / w.sum(), atol=1e-4)
    assert len(opt.points) == 50 == int(opt.blocks["n_allocated"].sum())


def test_custom_instructions_template(blocks):
    plan = make_plan(
        blocks,
        design="clusters",
        design_options={
            "per_block": 2,
            "units_per_cluster": 3,
            "instructions": "{block} r{row} p{plant}: {units}",
        },
        seed=2,
    )
    first = plan.points.iloc[0]
    assert first["instructions"] == f"{first['block']} r{first['row']} p{first['plant']}: 3"
    from fieldplan.errors import OptionError

    with pytest.raises(OptionError, match="placeholder"):
        make_plan(blocks, design="clusters", design_options={"per_block": 2, "instructions": "{tree}"})


@pytest.mark.parametrize("design", ["random", "balanced", "clusters"])
def test_exclusions_are_kept_free_and_covered_blocks_flagged(blocks, design):
    ex = gpd.GeoDataFrame(
        {"name": ["all of V09", "middle of V01"]},
        geometry=[blocks.geometry.iloc[13].buffer(1.0), blocks.geometry.iloc[5].buffer(-20.0)],
        crs=blocks.crs,
    )
    plan = make_plan(blocks, design=design, design_options={"per_block": 3}, exclusions=ex, seed=1)
    # reference: shapely (GEOS) intersects; no point may fall in an exclusion
    assert not shapely.intersects(plan.points.geometry.values, shapely.union_all(ex.geometry.values)).any()
    v09 = plan.summary().set_index("block").loc["V09"]
    assert v09["n_points"] == 0 and "exclusions cover the block" in v09["flags"]
