"""Block-zone pieces for plans by zone, and the cLHS design runner."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pytest
import shapely

from fieldplan.errors import InputError, OptionError
from fieldplan.plan import sample_areas
from fieldplan.zones_plan import ZONE_SD_FIELD, ZONE_STRATUM_FIELD, clhs_design, split_by_zones

rasterio = pytest.importorskip("rasterio")

UTM = "EPSG:32734"
X0, Y0 = 300_000.0, 6_250_000.0


def _blocks() -> gpd.GeoDataFrame:
    return gpd.GeoDataFrame(
        {"block": ["A", "B"], "variety": ["x", "y"]},
        geometry=[shapely.box(X0, Y0, X0 + 200, Y0 + 100), shapely.box(X0 + 200, Y0, X0 + 300, Y0 + 100)],
        crs=UTM,
    )


def _zones() -> gpd.GeoDataFrame:
    # Zone 1: the western 120 m of A; zone 2: the rest of A and all of B.
    geoms = [
        shapely.box(X0, Y0, X0 + 120, Y0 + 100),
        shapely.box(X0 + 120, Y0, X0 + 200, Y0 + 100),
        shapely.box(X0 + 200, Y0, X0 + 300, Y0 + 100),
    ]
    return gpd.GeoDataFrame(
        {"block": ["A", "A", "B"], "zone": [1, 2, 2], "area_ha": [1.2, 0.8, 1.0],
         "eca_mean": [10.0, 20.0, 22.0], "eca_sd": [1.0, 3.0, 2.0], "ndvi_sd": [0.1, 0.2, 0.3]},
        geometry=geoms, crs=UTM,
    )


def test_pieces_partition_each_blocks_sampling_area():
    blocks = _blocks()
    areas = sample_areas(blocks, edge_buffer=5.0)
    pieces, piece_areas, notes = split_by_zones(blocks, areas, _zones())
    assert list(pieces["block"]) == ["A-z1", "A-z2", "B-z2"]
    assert list(pieces["parent_block"]) == ["A", "A", "B"] and list(pieces["zone"]) == [1, 2, 2]
    assert list(pieces["variety"]) == ["x", "x", "y"]
    for name, area in zip(blocks["block"], areas, strict=True):
        mine = piece_areas[(pieces["parent_block"] == name).to_numpy()]
        # reference: shapely areas; the pieces of a block add up to its sampling area (headland
        # applied to the block's outline, not to each piece)
        assert sum(p.area for p in mine) == pytest.approx(area.area, rel=1e-9)
    assert piece_areas[0].area == pytest.approx(115 * 90)  # 5 m headland on three sides, by hand
    assert list(pieces[ZONE_SD_FIELD]) == [1.0, 3.0, 2.0]  # the first covariate's SD by default
    assert list(pieces[ZONE_STRATUM_FIELD]) == ["A-z1", "A-z2", "B-z2"]
    across, _, _ = split_by_zones(blocks, areas, _zones(), across=True, sd_covariate="ndvi")
    assert list(across[ZONE_STRATUM_FIELD]) == ["zone 1", "zone 2", "zone 2"]
    assert list(across[ZONE_SD_FIELD]) == [0.1, 0.2, 0.3]
    assert notes == []


def test_zones_must_match_the_blocks():
    blocks = _blocks()
    zones = _zones()
    zones = zones[zones["block"] == "A"]
    with pytest.raises(InputError, match="no zones for block"):
        split_by_zones(blocks, blocks.geometry.values, zones)
    with pytest.raises(OptionError, match="no such covariate"):
        split_by_zones(blocks, blocks.geometry.values, _zones(), sd_covariate="yield")


def _write_tif(path, values, transform):
    with rasterio.open(path, "w", driver="GTiff", width=values.shape[1], height=values.shape[0], count=1,
                       dtype="float32", crs=UTM, transform=transform) as dst:
        dst.write(values.astype("float32"), 1)


def test_clhs_design_places_points_at_cell_centres_inside_blocks(tmp_path):
    from rasterio.transform import from_origin

    blocks = _blocks()
    areas = sample_areas(blocks, edge_buffer=4.0)
    rng = np.random.default_rng(0)
    _write_tif(tmp_path / "a.tif", rng.uniform(size=(30, 70)), from_origin(X0 - 20, Y0 + 120, 5, 5))
    _write_tif(tmp_path / "b.tif", rng.normal(size=(30, 70)), from_origin(X0 - 20, Y0 + 120, 5, 5))
    params = {"seed": 3, "design_options": {"covariates": [str(tmp_path / "a.tif"), str(tmp_path / "b.tif")],
                                            "n": 12, "cell": 5.0, "clhs_iterations": 3000}}
    table, flags = clhs_design(blocks, areas, params, None, None)
    assert len(table) == 12 and set(table.columns) >= {"block", "x", "y", "a", "b"}
    pts = shapely.points(table["x"], table["y"])
    owner = {b: g for b, g in zip(blocks["block"], areas, strict=True)}
    # reference: shapely contains; every point lies in its block's sampling area
    assert all(owner[b].contains(p) for b, p in zip(table["block"], pts, strict=True))
    assert any("quantile strata hit once" in n for n in table.attrs["notes"])
    again, _ = clhs_design(blocks, areas, params, None, None)
    assert again.equals(table)  # same seed, same points
    with pytest.raises(OptionError, match="--n"):
        clhs_design(blocks, areas, {"seed": 1, "design_options": {"covariates": ["a.tif"]}}, None, None)


def _zones_file(tmp_path) -> str:
    path = tmp_path / "zones.gpkg"
    _zones().to_file(path, layer="zones", driver="GPKG")
    return str(path)


def test_plan_by_zone_neyman_with_the_zone_sd_as_stand_in(tmp_path):
    from fieldplan.plan import make_plan

    plan = make_plan(
        _blocks(),
        {"design": "random", "n": 30, "zones": _zones_file(tmp_path), "strata_by": "zone", "allocation": "neyman",
         "min_per_stratum": 0},
        seed=4,
    )
    b = plan.blocks.set_index("block")
    assert list(b.index) == ["A-z1", "A-z2", "B-z2"] and list(b["parent_block"]) == ["A", "A", "B"]
    # reference: Neyman allocation (Cochran 1977, eq. 5.26): n_h = n N_h S_h / sum N_h S_h, with the
    # zone's covariate SD as S_h and the piece's area as N_h
    area = np.array([1.2, 0.8, 1.0])
    sd = np.array([1.0, 3.0, 2.0])
    np.testing.assert_allclose(b["n_target_exact"], 30 * area * sd / (area * sd).sum(), rtol=1e-3)
    assert b["n_points"].sum() == 30
    assert set(plan.points["block"]) <= set(b.index)
    pts = plan.points
    owner = dict(zip(plan.blocks["block"], plan.blocks.geometry, strict=True))
    # reference: shapely contains; each point lies in its block-zone piece
    assert all(owner[k].covers(p) for k, p in zip(pts["block"], pts.geometry, strict=True))


def test_plan_across_blocks_and_area_weighted_estimate(tmp_path):
    import pandas as pd

    from fieldplan.estimate.table import estimate_table
    from fieldplan.plan import make_plan

    plan = make_plan(
        _blocks(),
        {"design": "random", "n": 20, "zones": _zones_file(tmp_path), "strata_by": "zone",
         "strata_across_blocks": True},
        seed=2,
    )
    b = plan.blocks.set_index("block")
    assert list(b["stratum"]) == ["zone 1", "zone 2", "zone 2"]
    # proportional to zone area across blocks: zone 1 1.2 ha, zone 2 1.8 ha (reference: Cochran 5.3)
    assert b.loc["A-z1", "n_target_exact"] == pytest.approx(20 * 1.2 / 3.0, rel=1e-3)
    pts = plan.points
    values = np.where(pts["block"].str.endswith("z1"), 10.0, 20.0) + np.arange(len(pts)) * 0.1
    results = pd.DataFrame({"round": 1, "date": "2027-03-01", "point_id": pts["point_id"], "unit": "",
                            "value": values, "units_measured": 1, "variable": "ph"})
    est = estimate_table(pts, plan.blocks, results, value="ph", design="random")
    overall = est[est["group"] == est["group"].iloc[-1]].iloc[0]
    # reference: Cochran 1977, eq. 5.1 - the mean of the piece means weighted by sampled area
    means = pd.Series(values).groupby(pts["block"].to_numpy()).mean()
    w = b.loc[means.index, "sampled_area_ha"] / b.loc[means.index, "sampled_area_ha"].sum()
    assert overall["mean"] == pytest.approx(float((w * means).sum()), rel=1e-9)


def test_plan_clhs_design_through_the_spec(tmp_path):
    from rasterio.transform import from_origin

    from fieldplan.plan import make_plan

    rng = np.random.default_rng(1)
    _write_tif(tmp_path / "a.tif", rng.uniform(size=(30, 70)), from_origin(X0 - 20, Y0 + 120, 5, 5))
    plan = make_plan(_blocks(), {"design": "clhs", "n": 15, "covariates": str(tmp_path / "a.tif"),
                                 "clhs_iterations": 2000}, seed=9)
    assert len(plan.points) == 15 and set(plan.points["design"]) == {"clhs"}
    assert any("quantile strata hit once per covariate: a 15/15" in n for n in plan.meta["notes"])
    with pytest.raises(OptionError, match="covariates"):
        make_plan(_blocks(), {"design": "clhs", "n": 15}, seed=9)


def test_plan_command_by_zone_and_its_errors(tmp_path):
    from typer.testing import CliRunner

    from fieldplan.cli.main import app

    blocks = tmp_path / "blocks.geojson"
    _blocks().to_crs("EPSG:4326").to_file(blocks, driver="GeoJSON")
    zones = _zones_file(tmp_path)
    run = CliRunner().invoke(app, ["plan", str(blocks), "--zones", zones, "--strata-by", "zone",
                                   "--strata-across-blocks", "--design", "random", "--n", "12", "--seed", "3",
                                   "--out", str(tmp_path / "p"), "-q"])
    assert run.exit_code == 0, run.output
    summary = (tmp_path / "p" / "summary.csv").read_text()
    assert "A-z1" in summary and "zone 2" in summary
    bad = CliRunner().invoke(app, ["plan", str(blocks), "--strata-across-blocks", "--design", "random",
                                   "--n", "12", "--out", str(tmp_path / "q")])
    assert bad.exit_code == 2 and "--strata-across-blocks applies with --zones" in bad.output
    assert "Traceback" not in bad.output and not (tmp_path / "q").exists()
