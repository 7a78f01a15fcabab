"""Revisiting permanent sites: same spots to the millimetre, linked ids, changed blocks, paired change."""

from __future__ import annotations

import json

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely
from scipy import stats
from typer.testing import CliRunner

from fieldplan.cli.main import app
from fieldplan.demo import demo_blocks_path
from fieldplan.estimate.paired import paired_differences
from fieldplan.store import load_plan

runner = CliRunner()
BLOCKS = str(demo_blocks_path())


def _run(*args):
    result = runner.invoke(app, [str(a) for a in args])
    assert result.exit_code == 0, result.output
    return result


@pytest.fixture(scope="module")
def first(tmp_path_factory):
    out = tmp_path_factory.mktemp("rounds") / "2026"
    _run("plan", BLOCKS, "--design", "balanced", "--per-block", "3", "--purpose", "soil", "--cores", "8",
         "--seed", "4", "-q", "--out", out)
    return out


def test_revisit_keeps_sites_to_the_millimetre_and_links_sample_ids(first, tmp_path):
    out = tmp_path / "2027"
    result = _run("plan", BLOCKS, "--revisit", first, "--out", out)
    assert "new seed" in result.output
    old, new = load_plan(first), load_plan(out)
    assert new.crs == old.crs
    merged = new.points.merge(old.points, on="point_id", suffixes=("", "_old"))
    assert len(merged) == len(old.points) == len(new.points)
    # reference: pyproj.Geod (WGS84 ellipsoid) distance between each site's two positions
    geod = __import__("pyproj").Geod(ellps="WGS84")
    a = gpd.GeoSeries(merged.geometry.values, crs=new.crs).to_crs(4326)
    b = gpd.GeoSeries(merged["geometry_old"].values, crs=old.crs).to_crs(4326)
    _, _, dist = geod.inv(a.x.to_numpy(), a.y.to_numpy(), b.x.to_numpy(), b.y.to_numpy())
    assert np.max(dist) < 0.001
    assert (merged["previous_sample_id"] == merged["sample_id_old"]).all()
    assert not set(new.points["sample_id"]) & set(old.points["sample_id"])
    params = json.loads((out / "manifest.json").read_text())["parameters"]
    assert params["revisit"] == str(first) and params["design"] == "balanced" and params["cores"] == 8
    # The soil cores go back to the earlier cores' spots.
    key = ["point_id", "core"]
    cores = new.layers["cores"].merge(old.layers["cores"], on=key, suffixes=("", "_old"))
    assert len(cores) == len(old.layers["cores"])
    np.testing.assert_allclose(
        shapely.get_coordinates(gpd.GeoSeries(cores["geometry"]).values),
        shapely.get_coordinates(gpd.GeoSeries(cores["geometry_old"]).values),
        atol=1e-3,
    )


def _shrunk_blocks(tmp_path, first):
    """The demo blocks with the first block cut in half (a part was replanted)."""
    old = load_plan(first)
    frame = gpd.read_file(BLOCKS)
    name = str(old.points["block"].iloc[0])
    row = frame.index[frame["block"].astype(str) == name][0]
    local = frame.to_crs(old.crs)
    geom = local.geometry.iloc[row]
    minx, miny, maxx, maxy = geom.bounds
    sites = old.points[old.points["block"] == name]
    # Cut at the median site's x so some sites fall outside.
    cut = float(np.median(sites.geometry.x))
    local.loc[row, "geometry"] = geom.intersection(shapely.box(minx - 1, miny - 1, cut, maxy + 1))
    path = tmp_path / "blocks-2027.geojson"
    local.to_crs(4326).to_file(path, driver="GeoJSON")
    return path, name


def test_sites_outside_a_changed_block_are_refused_or_dropped(first, tmp_path):
    path, name = _shrunk_blocks(tmp_path, first)
    refused = runner.invoke(app, ["plan", str(path), "--revisit", str(first), "--out", str(tmp_path / "r")])
    assert refused.exit_code == 2
    assert "outside their block" in refused.output and "--revisit-changed drop" in refused.output
    assert not (tmp_path / "r").exists()
    out = tmp_path / "d"
    _run("plan", path, "--revisit", first, "--revisit-changed", "drop", "--seed", "1", "-q", "--out", out)
    new, old = load_plan(out), load_plan(first)
    flags = new.blocks.set_index("block").loc[name, "flags"]
    assert "boundary moved" in flags and "left out" in flags
    gone = set(old.points["point_id"]) - set(new.points["point_id"])
    assert gone and all(p.startswith(name) for p in gone)
    kept = new.points[new.points["block"] == name]
    assert (kept["site_note"] == "block boundary moved").all()


def test_paired_interval_matches_scipy_ttest_rel():
    rng = np.random.default_rng(3)
    before = rng.normal(6.2, 0.4, 25)
    after = before + rng.normal(0.15, 0.2, 25)
    ids = [f"S{i}" for i in range(25)]
    got = paired_differences(pd.Series(after, index=ids), pd.Series(before, index=ids), confidence=0.9)
    # reference: scipy.stats.ttest_rel (paired t test) and its confidence interval
    ref = stats.ttest_rel(after, before)
    ci = ref.confidence_interval(confidence_level=0.9)
    assert got["n"] == 25 and got["df"] == 24
    assert got["t"] == pytest.approx(ref.statistic, rel=1e-10)
    assert got["lower"] == pytest.approx(ci.low, rel=1e-7)
    assert got["upper"] == pytest.approx(ci.high, rel=1e-7)
    assert got["mean_diff"] == pytest.approx(np.mean(after - before))


def test_paired_differences_use_only_sites_in_both_rounds():
    before = pd.Series([1.0, 2.0, 3.0, 9.0], index=["a", "b", "c", "x"])
    after = pd.Series([1.5, 2.5, 4.0], index=["a", "b", "c"])
    got = paired_differences(after, before)
    # reference: scipy.stats.ttest_rel on the three complete pairs
    ref = stats.ttest_rel([1.5, 2.5, 4.0], [1.0, 2.0, 3.0])
    assert got["n"] == 3 and got["t"] == pytest.approx(ref.statistic)
    assert np.isnan(paired_differences(after.iloc[:1], before)["lower"])


def _results(plan_dir, path, values):
    plan = load_plan(plan_dir)
    frame = pd.DataFrame({"point_id": plan.points["point_id"], "ph": values(len(plan.points))})
    frame.to_csv(path, index=False)
    _run("results", plan_dir, path, "--accept-outliers")
    return plan, frame


def test_estimate_change_between_revisited_rounds(first, tmp_path):
    out = tmp_path / "2027"
    _run("plan", BLOCKS, "--revisit", first, "--seed", "9", "-q", "--out", out)
    rng = np.random.default_rng(1)
    base = rng.normal(6.0, 0.3, 100)
    _, old = _results(first, tmp_path / "r2026.csv", lambda n: np.round(base[:n], 2))
    new_plan, new = _results(out, tmp_path / "r2027.csv", lambda n: np.round(base[:n] + 0.2 + rng.normal(0, 0.05, n), 2))
    result = _run("estimate", out, "--variable", "ph", "--previous", first, "--confidence", "0.95")
    assert "change at the same sites" in result.output
    table = pd.read_csv(out / "changes.csv")
    overall = table[table["group"] == "all"].iloc[0]
    pairs = new.merge(old, on="point_id", suffixes=("_after", "_before"))
    # reference: scipy.stats.ttest_rel on the same pairs
    ref = stats.ttest_rel(pairs["ph_after"], pairs["ph_before"])
    ci = ref.confidence_interval(0.95)
    assert overall["n"] == len(pairs)
    assert overall["lower"] == pytest.approx(ci.low, rel=1e-5) and overall["upper"] == pytest.approx(ci.high, rel=1e-5)
    assert set(table["group"]) == {*new_plan.points["block"].astype(str), "all"}


def test_revisit_keeps_the_sites_sampled_not_unused_spares_or_inaccessible_points(tmp_path):
    first = tmp_path / "2026"
    _run("plan", BLOCKS, "--design", "random", "--per-block", "2", "--spares", "1", "--seed", "2", "-q",
         "--out", first)
    old = load_plan(first)
    gone = str(old.points.loc[old.points["status"] == "selected", "point_id"].iloc[0])
    _run("mark", first, gone, "--inaccessible", "--reason", "flooded", "-q")
    marked = load_plan(first)
    active = set(marked.points.loc[marked.points["status"].isin(["selected", "replacement"]), "point_id"])
    out = tmp_path / "2027"
    _run("plan", BLOCKS, "--revisit", first, "--seed", "3", "-q", "--out", out)
    new = load_plan(out)
    # common practice, no source: a permanent site is where the sample was actually taken
    assert set(new.points["point_id"]) == active
    assert gone not in set(new.points["point_id"])
