"""Named test geometries (metres, local frame) and helpers to build block files."""

from __future__ import annotations

import json
from pathlib import Path

import geopandas as gpd
import numpy as np
import shapely

UTM33N = "EPSG:32633"
E0, N0 = 500_000.0, 5_300_000.0  # a spot in central Europe, UTM 33N

square = shapely.box(E0, N0, E0 + 400, N0 + 300)
concave = shapely.Polygon(
    [(E0, N0), (E0 + 500, N0), (E0 + 500, N0 + 400), (E0 + 250, N0 + 120), (E0, N0 + 400)]
)
with_hole = shapely.box(E0, N0, E0 + 400, N0 + 400).difference(shapely.Point(E0 + 200, N0 + 200).buffer(80))
multipart = shapely.union_all(
    [shapely.box(E0, N0, E0 + 200, N0 + 150), shapely.box(E0 + 300, N0, E0 + 500, N0 + 150)]
)
tiny = shapely.box(E0, N0, E0 + 12, N0 + 12)
bowtie = shapely.Polygon([(E0, N0), (E0 + 100, N0 + 100), (E0 + 100, N0), (E0, N0 + 100)])


def blocks_frame(geoms: dict, crs: str = UTM33N, **columns) -> gpd.GeoDataFrame:
    """GeoDataFrame with a ``block`` column from a name -> geometry dict."""
    data = {"block": list(geoms), **columns}
    return gpd.GeoDataFrame(data, geometry=list(geoms.values()), crs=crs)


def write_geojson(frame: gpd.GeoDataFrame, path: Path) -> Path:
    """Write a frame as WGS84 GeoJSON (as a GPS-era tool would) and return the path."""
    frame.to_crs(4326).to_file(path, driver="GeoJSON")
    return path


def lonlat_square(lon: float, lat: float, size_deg: float = 0.003) -> shapely.Polygon:
    return shapely.box(lon, lat, lon + size_deg, lat + size_deg)


def load_geojson(path: Path) -> dict:
    return json.loads(Path(path).read_text())


def nearest_neighbour_distances(xy: np.ndarray) -> np.ndarray:
    from scipy.spatial import cKDTree

    dist, _ = cKDTree(xy).query(xy, k=2)
    return dist[:, 1]


def lonlat_estate_file(
    path: Path,
    blocks: list[tuple],
    *,
    lon0: float = 18.9,
    lat0: float = -33.86,
    step: float = 0.003,
    width: float = 0.0025,
    height: float = 0.002,
) -> Path:
    """Write side-by-side lon/lat rectangles as a GeoJSON block file and return its path.

    ``blocks`` holds ``(name, variety)`` or ``(name, variety, width_deg)`` tuples.
    """
    features = []
    for i, spec in enumerate(blocks):
        name, variety = spec[0], spec[1]
        w = spec[2] if len(spec) > 2 else width
        x0, y0 = lon0 + i * step, lat0
        ring = [[x0, y0], [x0 + w, y0], [x0 + w, y0 + height], [x0, y0 + height], [x0, y0]]
        features.append(
            {
                "type": "Feature",
                "properties": {"block": name, "variety": variety},
                "geometry": {"type": "Polygon", "coordinates": [ring]},
            }
        )
    Path(path).write_text(json.dumps({"type": "FeatureCollection", "features": features}))
    return Path(path)
