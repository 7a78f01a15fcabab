"""Covariates: rasters warped onto the plan grid, surveys kriged with a fitted variogram."""

from __future__ import annotations

import warnings
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import shapely

from fieldplan.covariates import (
    Variogram,
    empirical_variogram,
    fit_variogram,
    interpolate,
    load_covariates,
    make_grid,
    ordinary_kriging,
    read_raster,
)
from fieldplan.errors import InputError

rasterio = pytest.importorskip("rasterio")
skgstat = pytest.importorskip("skgstat")

UTM = "EPSG:32734"


def _meuse() -> tuple[np.ndarray, np.ndarray]:
    # Meuse flood-plain topsoil survey (155 samples, Pebesma & Bivand 2005) as shipped in
    # scikit-gstat's data folder; log zinc is the classic kriging example variable.
    path = Path(skgstat.__file__).parent / "data" / "samples" / "meuse.txt"
    frame = pd.read_csv(path)
    return frame[["x", "y"]].to_numpy(dtype="float64"), np.log(frame["zinc"].to_numpy(dtype="float64"))


def _maxlag(xy: np.ndarray) -> float:
    return 0.5 * float(np.hypot(*np.ptp(xy, axis=0)))


def test_empirical_variogram_matches_scikit_gstat_on_meuse():
    xy, z = _meuse()
    ref = skgstat.Variogram(xy, z, model="spherical", n_lags=12, maxlag=_maxlag(xy))
    edges, _, gamma, _ = empirical_variogram(xy, z, n_lags=12, maxlag=_maxlag(xy))
    # reference: skgstat.Variogram (Matheron estimator, even lag classes)
    np.testing.assert_allclose(edges, ref.bins, rtol=1e-12)
    np.testing.assert_allclose(gamma, ref.experimental, rtol=1e-10)


@pytest.mark.parametrize("model", ["spherical", "exponential", "gaussian"])
def test_kriging_matches_scikit_gstat_ordinary_kriging_on_meuse(model):
    xy, z = _meuse()
    ref = skgstat.Variogram(xy, z, model=model, n_lags=12, maxlag=_maxlag(xy))
    r, c0, b = ref.parameters
    ours = Variogram(model, r, c0, b)
    # The model functions share scikit-gstat's parameterisation (effective range).
    h = np.linspace(1, 2000, 50)
    np.testing.assert_allclose(ours(h), ref.fitted_model(h), rtol=1e-10)  # reference: skgstat models
    rng = np.random.default_rng(3)
    targets = np.column_stack([rng.uniform(178800, 181400, 80), rng.uniform(329800, 333600, 80)])
    krige = skgstat.OrdinaryKriging(ref, min_points=3, max_points=16)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # skgstat warns about the few targets out of range
        expected = krige.transform(targets[:, 0], targets[:, 1])
    est, var = ordinary_kriging(xy, z, targets, ours, max_points=16, min_points=3, radius=r)
    # reference: skgstat.OrdinaryKriging (same neighbourhood: the 16 nearest within the range)
    np.testing.assert_array_equal(np.isnan(est), np.isnan(expected))
    ok = np.isfinite(expected)
    assert ok.sum() >= 60
    np.testing.assert_allclose(est[ok], expected[ok], rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(var[ok], krige.sigma[ok], rtol=1e-8, atol=1e-10)


def test_kriging_is_exact_at_data_points_and_weights_sum_to_one():
    xy, z = _meuse()
    v = Variogram("spherical", 900.0, 0.55, 0.0)
    est, var = ordinary_kriging(xy, z, xy[:20], v)
    # reference: ordinary kriging is an exact interpolator without nugget (Webster & Oliver 2007, 8.2)
    np.testing.assert_allclose(est, z[:20], atol=1e-8)
    np.testing.assert_allclose(var, 0.0, atol=1e-8)
    const, _ = ordinary_kriging(xy, np.full(len(z), 4.2), xy[:5] + 37.0, v)
    np.testing.assert_allclose(const, 4.2, rtol=1e-12)  # unbiasedness: weights sum to 1


def test_fitted_variogram_follows_scikit_gstat_fit_on_meuse():
    xy, z = _meuse()
    ours = fit_variogram(xy, z, models=("spherical",), n_lags=12, maxlag=_maxlag(xy))
    ref = skgstat.Variogram(xy, z, model="spherical", n_lags=12, maxlag=_maxlag(xy), use_nugget=True)
    assert ours is not None and ours.model == "spherical"
    sill = ref.parameters[1] + ref.parameters[2]
    _, mean_h, _, _ = empirical_variogram(xy, z, n_lags=12, maxlag=_maxlag(xy))
    # reference: skgstat.Variogram.fit (trf least squares). scikit-gstat places each lag class
    # at its upper edge, ours at its mean pair distance (and weights classes by pair count),
    # so the models are compared class by class, each at its own lag, within 5 % of the sill.
    assert np.max(np.abs(ours(mean_h) - ref.fitted_model(ref.bins))) < 0.05 * sill
    assert abs(ours.psill + ours.nugget - sill) < 0.1 * sill


def test_interpolate_falls_back_to_inverse_distance_and_says_so():
    rng = np.random.default_rng(0)
    xy = rng.uniform(0, 100, (12, 2))
    z = rng.normal(size=12)
    values, method = interpolate(xy, z, xy[:3], rng=rng)
    assert method.startswith("inverse distance") and "fewer than 30" in method
    np.testing.assert_allclose(values, z[:3])  # IDW is exact at data points (Shepard 1968)
    xy2, z2 = _meuse()
    _, method2 = interpolate(xy2, z2, xy2[:3], rng=rng)
    assert method2.startswith("ordinary kriging")


def _blocks() -> gpd.GeoDataFrame:
    x0, y0 = 300_000.0, 6_250_000.0
    geoms = [shapely.box(x0, y0, x0 + 200, y0 + 100), shapely.box(x0 + 200, y0, x0 + 300, y0 + 100)]
    return gpd.GeoDataFrame({"block": ["A", "B"]}, geometry=geoms, crs=UTM)


def _write_tif(path: Path, data: np.ndarray, transform, crs: str, nodata=None) -> None:
    with rasterio.open(
        path, "w", driver="GTiff", width=data.shape[1], height=data.shape[0], count=1,
        dtype=data.dtype, crs=crs, transform=transform, nodata=nodata,
    ) as dst:
        dst.write(data, 1)


def test_raster_in_another_crs_is_resampled_and_nodata_left_out(tmp_path):
    from pyproj import Transformer
    from rasterio.transform import from_origin

    blocks = _blocks()
    grid = make_grid(blocks, blocks.geometry.values, cell=10.0)
    assert grid.mask.sum() == 300  # 3 ha of 10 m cells, centres inside
    # A WGS84 raster (~1 m pixels) whose value is the UTM easting of each pixel centre,
    # with a nodata square over block B's eastern half.
    to_ll = Transformer.from_crs(UTM, "EPSG:4326", always_xy=True)
    to_utm = Transformer.from_crs("EPSG:4326", UTM, always_xy=True)
    lon0, lat1 = to_ll.transform(299_950.0, 6_250_150.0)
    step = 1e-5
    shape = (2200, 4300)
    lons = lon0 + (np.arange(shape[1]) + 0.5) * step
    lats = lat1 - (np.arange(shape[0]) + 0.5) * step
    east, _ = to_utm.transform(*np.meshgrid(lons, lats))
    data = east.astype("float32")
    lon_nd, _ = to_ll.transform(300_250.0, 6_250_050.0)
    data[:, lons > lon_nd] = -9999.0
    _write_tif(tmp_path / "east.tif", data, from_origin(lon0, lat1, step, step), "EPSG:4326", nodata=-9999.0)
    values, method = read_raster(tmp_path / "east.tif", grid)
    assert method == "raster, average"
    rows, cols = np.nonzero(grid.mask)
    x, _ = grid.centres(rows, cols)
    got = values[rows, cols]
    # reference: pyproj.Transformer (each pixel holds its own UTM easting); averaging a
    # linear field over a 10 m cell returns the value at the centre.
    far = x < 300_240.0
    np.testing.assert_allclose(got[far], x[far], atol=0.6)
    # nodata pixels are never read as -9999: cells wholly under the nodata part have no value
    assert np.all(np.isnan(got[x > 300_260.0]))
    assert np.nanmin(got) > 299_990.0
    assert np.all(np.isnan(values[~grid.mask]))


def _wave(x: np.ndarray) -> np.ndarray:
    return 10 + 2 * np.sin(2 * np.pi * (x - 300_000) / 160)


def test_load_covariates_with_a_survey_csv(tmp_path):
    from rasterio.transform import from_origin

    blocks = _blocks()
    rng = np.random.default_rng(5)
    x = rng.uniform(299_990, 300_310, 200)
    y = rng.uniform(6_249_990, 6_250_110, 200)
    pd.DataFrame({"x": x, "y": y, "eca": _wave(x) + rng.normal(0, 0.1, 200)}).to_csv(
        tmp_path / "eca.csv", index=False
    )
    elev = np.tile(np.arange(40, dtype="float32"), (20, 1))
    _write_tif(tmp_path / "elev.tif", elev, from_origin(299_900, 6_250_150, 10, 10), UTM)
    cov = load_covariates([str(tmp_path / "eca.csv"), str(tmp_path / "elev.tif")], blocks,
                          blocks.geometry.values, cell=5.0, seed=1)
    assert cov.names == ["eca:eca", "elev"]
    assert cov.methods["eca:eca"].startswith("ordinary kriging")
    rows, cols, table = cov.cells()
    assert table.shape == (1200, 2)
    gx, _ = cov.grid.centres(rows, cols)
    # the survey's pattern is recovered: reference, the function it was drawn from
    assert np.corrcoef(table[:, 0], _wave(gx))[0, 1] > 0.95
    with pytest.raises(InputError, match="does not overlap"):
        _write_tif(tmp_path / "far.tif", elev, from_origin(0, 100, 1, 1), UTM)
        load_covariates([str(tmp_path / "far.tif")], blocks, blocks.geometry.values, cell=5.0)
