"""Local metric CRS choice and area accuracy."""

from __future__ import annotations

import numpy as np
import pytest
import shapely
from pyproj import Geod
from pyproj.aoi import AreaOfInterest
from pyproj.database import query_utm_crs_info

from fieldplan.crs import utm_crs_for
from fieldplan.read import read_blocks
from tests.geoms import blocks_frame, lonlat_square, write_geojson


@pytest.mark.parametrize(
    ("lon", "lat"),
    [(18.9, -33.9), (-71.5, -35.2), (146.9, -36.1), (5.0, 45.0), (-120.5, 38.5)],
)
def test_utm_zone_matches_pyproj_database(lon, lat):
    # reference: pyproj.database.query_utm_crs_info (the PROJ/EPSG database).
    infos = query_utm_crs_info(datum_name="WGS 84", area_of_interest=AreaOfInterest(lon, lat, lon, lat))
    codes = {int(i.code) for i in infos}
    assert utm_crs_for(lon, lat).to_epsg() in codes


def test_southern_hemisphere_gets_south_zone():
    # reference: UTM definition — southern hemisphere zones are EPSG 327zz (WGS 84 / UTM zone zzS).
    assert utm_crs_for(18.9, -33.9).to_epsg() == 32734


def test_zone_boundary_picks_zone_of_centroid(tmp_path):
    # reference: pyproj query_utm_crs_info for the centroid; UTM zones 32/33 meet at 12°E.
    block = lonlat_square(11.9995, 47.0, 0.004)  # centroid just east of 12°E
    frame = blocks_frame({"A": block}, crs="EPSG:4326")
    path = write_geojson(frame, tmp_path / "b.geojson")
    blocks = read_blocks(path)
    c = block.centroid
    infos = query_utm_crs_info(datum_name="WGS 84", area_of_interest=AreaOfInterest(c.x, c.y, c.x, c.y))
    assert blocks.crs.to_epsg() in {int(i.code) for i in infos}
    assert blocks.crs.to_epsg() == 32633


@pytest.mark.parametrize(("lon", "lat"), [(18.9, -33.9), (11.99, 47.0), (-120.5, 38.5), (24.0, 64.0)])
def test_area_agrees_with_geodesic_area(tmp_path, lon, lat):
    # reference: pyproj.Geod(ellps="WGS84").geometry_area_perimeter (Karney 2013 geodesic area).
    poly = shapely.Polygon(
        [(lon, lat), (lon + 0.01, lat + 0.001), (lon + 0.012, lat + 0.009), (lon - 0.002, lat + 0.007)]
    )
    path = write_geojson(blocks_frame({"A": poly}, crs="EPSG:4326"), tmp_path / "b.geojson")
    blocks = read_blocks(path)
    geodesic, _ = Geod(ellps="WGS84").geometry_area_perimeter(poly)
    assert blocks.geometry.area.iloc[0] == pytest.approx(abs(geodesic), rel=0.005)
    assert np.isfinite(blocks.geometry.area.iloc[0])
