"""Invent an ECa survey and a vegetation-index raster for the demo estate (Tallowmere Estate).

Everything written here is **invented** for demonstration, like the estate itself:

- ``estate_eca_survey.csv``: an apparent electrical conductivity survey (mS/m) as a sled would
  log it, east-west passes 25 m apart with a reading every 10 m, over the estate. The values
  follow an invented story: heavier, wetter soil towards the low north-east corner and along a
  buried old stream bed, plus smooth patchiness and sensor noise.
- ``estate_ndvi.tif``: a vegetation index (NDVI-like, 0-1) on a WGS84 raster of about 5 m
  pixels (so fieldplan has to warp it into the plan's UTM grid), greener where the invented soil
  holds more water, with its own patchiness and a cloud patch stored as nodata.

Run: python demo_plots/make_zone_covariates.py  (rewrites both files beside it; fixed seed)
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from pyproj import Transformer
from scipy.ndimage import gaussian_filter

HERE = Path(__file__).resolve().parent
UTM = "EPSG:32734"
TO_WGS = Transformer.from_crs(UTM, "EPSG:4326", always_xy=True)
TO_UTM = Transformer.from_crs("EPSG:4326", UTM, always_xy=True)
# The estate's extent in UTM 34S with a margin (see estate_blocks.geojson).
WEST, SOUTH, EAST, NORTH = 305_330.0, 6_250_760.0, 306_260.0, 6_251_960.0
SEED = 20260203


def _patchiness(rng: np.random.Generator, shape: tuple[int, int], scale_px: float) -> np.ndarray:
    field = gaussian_filter(rng.normal(size=shape), scale_px, mode="reflect")
    return field / field.std()


def soil_story(x: np.ndarray, y: np.ndarray, patches) -> np.ndarray:
    """Invented soil wetness index (about 0-1) at UTM coordinates."""
    u = (x - WEST) / (EAST - WEST)
    v = (y - SOUTH) / (NORTH - SOUTH)
    slope = 0.55 * (0.6 * u + 0.4 * v)  # lower, wetter towards the north-east
    stream = 0.35 * np.exp(-(((u - 0.25 - 0.45 * v) / 0.07) ** 2))  # an old stream bed running NE
    return slope + stream + 0.08 * patches(x, y)


def _sampler(field: np.ndarray, cell: float):
    def at(x: np.ndarray, y: np.ndarray) -> np.ndarray:
        col = np.clip(((x - WEST) / cell).astype(int), 0, field.shape[1] - 1)
        row = np.clip(((NORTH - y) / cell).astype(int), 0, field.shape[0] - 1)
        return field[row, col]

    return at


def main() -> None:
    import rasterio
    from rasterio.transform import from_origin

    rng = np.random.default_rng(SEED)
    cell = 5.0
    shape = (int((NORTH - SOUTH) / cell), int((EAST - WEST) / cell))
    patches = _sampler(_patchiness(rng, shape, 12.0), cell)

    # ECa survey: passes 25 m apart, a reading every 10 m, a little GPS wobble.
    ys = np.arange(SOUTH + 10, NORTH - 10, 25.0)
    xs = np.arange(WEST + 5, EAST - 5, 10.0)
    gx, gy = np.meshgrid(xs, ys)
    gx = gx + rng.normal(0, 1.0, gx.shape)
    gy = gy + rng.normal(0, 1.5, gy.shape)
    wet = soil_story(gx, gy, patches)
    eca = 12.0 + 38.0 * wet + rng.normal(0, 1.2, wet.shape)
    lon, lat = TO_WGS.transform(gx.ravel(), gy.ravel())
    survey = pd.DataFrame(
        {"lon": np.round(lon, 7), "lat": np.round(lat, 7), "eca_ms_m": np.round(eca.ravel(), 2)}
    )
    survey.to_csv(HERE / "estate_eca_survey.csv", index=False)

    # Vegetation index on a WGS84 grid of ~5 m pixels.
    lon0, lat1 = TO_WGS.transform(WEST, NORTH)
    lon1, lat0 = TO_WGS.transform(EAST, SOUTH)
    step = 0.00005
    width = int(np.ceil((lon1 - lon0) / step))
    height = int(np.ceil((lat1 - lat0) / step))
    plon = lon0 + (np.arange(width) + 0.5) * step
    plat = lat1 - (np.arange(height) + 0.5) * step
    px, py = TO_UTM.transform(*np.meshgrid(plon, plat))
    own = _sampler(_patchiness(rng, shape, 6.0), cell)
    ndvi = 0.35 + 0.35 * soil_story(px, py, patches) + 0.05 * own(px, py)
    ndvi = np.clip(ndvi + rng.normal(0, 0.01, ndvi.shape), 0.0, 1.0).astype("float32")
    # A cloud over the south-west: no data there.
    cloud = ((px - (WEST + 260)) / 70) ** 2 + ((py - (SOUTH + 300)) / 45) ** 2 < 1
    ndvi[cloud] = -9999.0
    with rasterio.open(
        HERE / "estate_ndvi.tif",
        "w",
        driver="GTiff",
        width=width,
        height=height,
        count=1,
        dtype="float32",
        crs="EPSG:4326",
        transform=from_origin(lon0, lat1, step, step),
        nodata=-9999.0,
        compress="deflate",
        predictor=3,
    ) as dst:
        dst.write(ndvi, 1)
        dst.update_tags(description="Invented vegetation index for the Tallowmere demo estate")
    print(f"wrote {len(survey):,} survey readings and a {width} x {height} raster")


if __name__ == "__main__":
    main()
