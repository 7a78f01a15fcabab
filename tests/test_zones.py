"""Management zones: clustering against scikit-learn, FPI/NCE formulas, smoothing, polygons."""

from __future__ import annotations

import math
import re

import geopandas as gpd
import numpy as np
import pytest
import shapely
from typer.testing import CliRunner

from fieldplan.covariates import Covariates, make_grid
from fieldplan.plan import sample_areas
from fieldplan.zones import (
    delineate,
    fpi,
    majority_filter,
    memberships,
    merge_small,
    nce,
    read_zones,
)

rasterio = pytest.importorskip("rasterio")
sklearn_cluster = pytest.importorskip("sklearn.cluster")

UTM = "EPSG:32734"
X0, Y0 = 300_000.0, 6_250_000.0


def _blocks() -> gpd.GeoDataFrame:
    geoms = [
        shapely.Polygon([(X0, Y0), (X0 + 240, Y0 + 10), (X0 + 230, Y0 + 160), (X0 + 5, Y0 + 150)]),
        shapely.box(X0 + 250, Y0, X0 + 400, Y0 + 150),
    ]
    return gpd.GeoDataFrame({"block": ["North", "South"]}, geometry=geoms, crs=UTM)


def _fields(grid, rng) -> np.ndarray:
    """Three covariates with three clear levels across the farm, plus noise."""
    rows, cols = np.indices((grid.height, grid.width))
    x, y = grid.centres(rows, cols)
    level = np.digitize(x - X0 + 0.3 * (y - Y0), [130, 270])
    a = level * 2.0 + rng.normal(0, 0.3, x.shape)
    b = -level * 1.5 + rng.normal(0, 0.3, x.shape)
    c = level * 0.5 + rng.normal(0, 0.3, x.shape)
    values = np.stack([a, b, c])
    values[:, ~grid.mask] = np.nan
    return values


def _covariates(blocks, areas, cell=5.0, seed=0) -> Covariates:
    grid = make_grid(blocks, areas, cell=cell)
    values = _fields(grid, np.random.default_rng(seed))
    return Covariates(grid, ["eca", "ndvi", "elev"], values, dict.fromkeys(["eca", "ndvi", "elev"], "test"))


def test_zones_equal_scikit_learn_kmeans_up_to_permutation():
    blocks = _blocks()
    cov = _covariates(blocks, blocks.geometry.values)
    zm = delineate(cov, blocks, blocks.geometry.values, k=3, smooth=1, seed=4)
    rows, cols, table = cov.cells()
    ours = zm.raw[rows, cols]
    standard = (table - table.mean(axis=0)) / table.std(axis=0)
    ref = sklearn_cluster.KMeans(n_clusters=3, n_init=20, random_state=0).fit(standard).labels_
    # reference: sklearn.cluster.KMeans on the same standardised cells; the contingency table
    # of the two labellings must be a permutation matrix (same partition, other numbers).
    table_ = np.zeros((4, 3), dtype=int)
    np.add.at(table_, (ours, ref), 1)
    table_ = table_[1:]
    assert ((table_ > 0).sum(axis=1) == 1).all() and ((table_ > 0).sum(axis=0) == 1).all()
    # zones are numbered by their mean first covariate
    means = [table[ours == z, 0].mean() for z in (1, 2, 3)]
    assert means == sorted(means)


def test_fuzzy_memberships_fpi_and_nce_by_hand():
    # Point at distance 1 from centre A and 2 from centre B, m = 2:
    # u_A = 1 / (1 + (1/2)^2) = 0.8, u_B = 0.2.  reference: Bezdek 1981, eq. (11.3)
    u = memberships(np.array([[0.0, 0.0]]), np.array([[1.0, 0.0], [-2.0, 0.0]]), 2.0)
    np.testing.assert_allclose(u, [[0.8, 0.2]], rtol=1e-12)
    u = np.array([[0.8, 0.2], [0.4, 0.6]])
    # F = (0.64 + 0.04 + 0.16 + 0.36) / 2 = 0.6; FPI = 1 - (2 * 0.6 - 1) / (2 - 1) = 0.8
    # reference: Odeh, Chittleborough & McBratney 1992, FPI
    assert fpi(u) == pytest.approx(0.8, abs=1e-12)
    h = -(0.8 * math.log(0.8) + 0.2 * math.log(0.2) + 0.4 * math.log(0.4) + 0.6 * math.log(0.6)) / 2
    # reference: Odeh et al. 1992, NCE = H / log(c)
    assert nce(u) == pytest.approx(h / math.log(2), abs=1e-12)
    assert nce(u) == pytest.approx(0.846439, abs=1e-6)  # worked by hand
    crisp = np.eye(3)
    assert fpi(crisp) == pytest.approx(0.0) and nce(crisp) == pytest.approx(0.0)
    even = np.full((4, 3), 1 / 3)
    assert fpi(even) == pytest.approx(1.0) and nce(even) == pytest.approx(1.0)


def test_auto_chooses_k_and_reports_the_table():
    blocks = _blocks()
    cov = _covariates(blocks, blocks.geometry.values)
    zm = delineate(cov, blocks, blocks.geometry.values, k="auto", method="fuzzy", seed=2)
    table = zm.choice
    assert list(table["k"]) == [2, 3, 4, 5, 6]
    assert table["chosen"].sum() == 1
    assert ((table["fpi"] >= 0) & (table["fpi"] <= 1) & (table["nce"] >= 0) & (table["nce"] <= 1)).all()
    # three levels were built in: the silhouette criterion finds them (Rousseeuw 1987)
    zs = delineate(cov, blocks, blocks.geometry.values, k="auto", criterion="silhouette", seed=2)
    assert zs.k == 3


def test_majority_filter_and_min_zone_area():
    labels = np.ones((7, 7), dtype=np.int16)
    labels[3, 3] = 2
    labels[0, :] = 0  # outside
    out = majority_filter(labels, size=3)
    # common practice, no source: a lone cell in a 3x3 majority filter takes its neighbours' class
    assert out[3, 3] == 1 and (out[0] == 0).all()
    labels = np.ones((6, 10), dtype=np.int16)
    labels[:, 6:] = 2
    labels[2:4, 1:3] = 3  # a 4-cell island inside zone 1
    merged = merge_small(labels, np.zeros_like(labels, dtype=np.int32), min_cells=5)
    assert (merged[2:4, 1:3] == 1).all() and (merged[:, 6:] == 2).all()
    two_blocks = np.zeros_like(labels, dtype=np.int32)
    two_blocks[:, 5:] = 1
    # pieces never merge across a block boundary: the small zone 2 piece in block 0 stays
    labels[:, 5] = 2
    kept = merge_small(labels, two_blocks, min_cells=7)
    assert (kept[:, 5] == 2).all()


def test_polygons_cover_the_sampling_area():
    blocks = _blocks()
    excl = gpd.GeoDataFrame({"name": ["wet"]}, geometry=[shapely.Point(X0 + 100, Y0 + 80).buffer(25)], crs=UTM)
    areas = sample_areas(blocks, edge_buffer=6.0, exclusions=excl)
    cov = _covariates(blocks, areas, cell=5.0)
    zm = delineate(cov, blocks, areas, k=3, seed=1, min_zone_ha=0.05)
    polys = zm.polygons
    for i, name in enumerate(blocks["block"]):
        got = polys.loc[polys["block"] == name, "area_ha"].sum() * 10_000
        union = shapely.union_all(polys.loc[polys["block"] == name].geometry.values)
        # reference: shapely area of the sampling area (block minus headland and exclusions)
        assert got == pytest.approx(areas[i].area, rel=1e-3)
        assert union.area == pytest.approx(got, rel=1e-6)  # no overlaps between zones
        assert union.symmetric_difference(areas[i]).area < 1e-3 * areas[i].area
    # statistics per (block, zone) come from the cells
    assert (polys["cells"] > 0).all()
    assert {"eca_mean", "eca_sd", "ndvi_mean", "elev_sd"} <= set(polys.columns)


def test_per_block_zoning_numbers_zones_within_each_block():
    blocks = _blocks()
    cov = _covariates(blocks, blocks.geometry.values)
    zm = delineate(cov, blocks, blocks.geometry.values, k=2, scope="block", seed=3)
    assert zm.k == {"North": 2, "South": 2}
    for name in ("North", "South"):
        assert set(zm.polygons.loc[zm.polygons["block"] == name, "zone"]) == {1, 2}


def _write_tif(path, values, grid):
    with rasterio.open(
        path, "w", driver="GTiff", width=grid.width, height=grid.height, count=1, dtype="float32",
        crs=grid.crs.to_wkt(), transform=grid.transform, nodata=-9999.0,
    ) as dst:
        dst.write(np.where(np.isfinite(values), values, -9999.0).astype("float32"), 1)


def test_zones_command_writes_gpkg_and_png(tmp_path):
    from fieldplan.cli.main import app

    blocks = _blocks()
    blocks.to_crs("EPSG:4326").to_file(tmp_path / "blocks.geojson", driver="GeoJSON")
    grid = make_grid(blocks, blocks.geometry.values, cell=5.0)
    values = _fields(grid, np.random.default_rng(0))
    _write_tif(tmp_path / "eca.tif", values[0], grid)
    _write_tif(tmp_path / "ndvi.tif", values[1], grid)
    out = tmp_path / "zones.gpkg"
    args = ["zones", str(tmp_path / "blocks.geojson"), "--covariates", str(tmp_path / "eca.tif"),
            str(tmp_path / "ndvi.tif"), "--zones", "auto", "--seed", "5", "--out", str(out)]
    result = CliRunner().invoke(app, args)
    assert result.exit_code == 0, result.output
    assert re.search(r"<- chosen", result.output)
    assert "eca: raster" in result.output
    zones = read_zones(out)
    assert len(zones) >= 2 and {"block", "zone", "area_ha", "eca_mean", "ndvi_sd"} <= set(zones.columns)
    png = out.with_suffix(".png").read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    again = CliRunner().invoke(app, args)
    assert again.exit_code == 2 and "--force" in again.output
    forced = CliRunner().invoke(app, [*args, "--force"])
    assert forced.exit_code == 0
    # same inputs and seed, same zones
    assert read_zones(out).drop(columns="geometry").equals(zones.drop(columns="geometry"))
    bad = CliRunner().invoke(app, ["zones", str(tmp_path / "blocks.geojson"), "--out", str(tmp_path / "z.gpkg")])
    assert bad.exit_code == 2 and "--covariates" in bad.output and "Traceback" not in bad.output
