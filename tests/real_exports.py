"""Block files in the shapes real farm exports have, built at test time.

Each builder writes one file into a folder and returns its path. The blocks are
an invented scenario; what is real is the file's shape: a Shapefile in a US
State Plane CRS (US survey feet) with the exporter's own ``AREA_HA`` and
spacings in feet, a GeoPackage in a national grid with several layers and a
self-crossing (bow-tie) block, a GeoJSON drawn on a phone (Z coordinates and a
gate pin), and KML/KMZ as desktop globe tools save them.
"""

from __future__ import annotations

import json
import zipfile
from pathlib import Path

import geopandas as gpd
import shapely

# Lon/lat corners of three rectangular blocks (degrees), and their ids in the order
# a farm lists them; "Blk 10" sorts after "Blk 2" in natural order.
NAPA = {
    "Blk 1": (-122.3000, 38.4000, -122.2975, 38.4020),
    "Blk 2": (-122.2970, 38.4000, -122.2940, 38.4025),
    "Blk 10": (-122.2935, 38.4000, -122.2915, 38.4015),
}
KENT = {
    "North": (0.7000, 51.2500, 0.7040, 51.2525),
    "South": (0.7000, 51.2460, 0.7040, 51.2490),
}
PHONE = {
    "Home block": (18.8600, -33.8600, 18.8630, -33.8580),
    "Creek block": (18.8640, -33.8600, 18.8665, -33.8582),
}


def lonlat_boxes(corners: dict) -> dict:
    return {name: shapely.box(*bounds) for name, bounds in corners.items()}


def state_plane_shapefile(folder: Path) -> Path:
    """EPSG:2226 (NAD83 / California zone 2, US survey feet), fields as a farm GIS exports them."""
    boxes = lonlat_boxes(NAPA)
    frame = gpd.GeoDataFrame(
        {
            "BLOCK_NAME": list(boxes),
            "Variety": ["Cabernet Sauvignon", "Merlot", "Chardonnay"],
            "Crop": ["Wine grape"] * 3,
            # The exporter's own area, rounded: a field the plan also writes (area_ha).
            "AREA_HA": [4.9, 7.3, 3.0],
            "RowSpacing": [8.0, 7.0, 9.0],  # feet
            "VineSpace": [5.0, 4.0, 6.0],  # feet
            "RowDir": [12.0, 12.0, 95.0],
            "FLAGS": ["organic", "", "new planting"],
        },
        geometry=list(boxes.values()),
        crs="EPSG:4326",
    ).to_crs("EPSG:2226")
    path = folder / "vineyard_blocks.shp"
    frame.to_file(path, engine="pyogrio")
    return path


BOWTIE_OFFSET = 100.0  # metres


def national_grid_gpkg(folder: Path) -> Path:
    """EPSG:27700 (British National Grid) GeoPackage: a blocks layer with a bow-tie, and a points layer."""
    boxes = gpd.GeoSeries(list(lonlat_boxes(KENT).values()), crs="EPSG:4326").to_crs("EPSG:27700")
    x0, y0 = boxes.total_bounds[2] + 50.0, boxes.total_bounds[1]
    size = BOWTIE_OFFSET
    # Corners drawn in the wrong order: the outline crosses itself in the middle.
    bowtie = shapely.Polygon([(x0, y0), (x0 + size, y0 + size), (x0 + size, y0), (x0, y0 + size)])
    blocks = gpd.GeoDataFrame(
        {
            "Block_ID": ["North", "South", "Bow"],
            "crop": ["apple", "pear", "apple"],
            "Area_ha": [1.1, 1.2, 0.5],
        },
        geometry=[*boxes.values, bowtie],
        crs="EPSG:27700",
    )
    path = folder / "orchard.gpkg"
    blocks.to_file(path, layer="Orchard Blocks", driver="GPKG", engine="pyogrio")
    trees = gpd.GeoDataFrame(
        {"tree": ["t1", "t2"]}, geometry=[boxes.iloc[0].centroid, boxes.iloc[1].centroid], crs="EPSG:27700"
    )
    trees.to_file(path, layer="trees", driver="GPKG", engine="pyogrio")
    return path


PHONE_ALTITUDE = 212.5


def phone_geojson(folder: Path) -> Path:
    """GeoJSON as a phone app saves a walked outline: lon, lat, altitude, and a gate pin."""
    features = []
    for name, (x0, y0, x1, y1) in PHONE.items():
        ring = [[x0, y0], [x1, y0], [x1, y1], [x0, y1], [x0, y0]]
        features.append(
            {
                "type": "Feature",
                "properties": {"name": name, "row_spacing_m": 2.5, "plant_spacing_m": 1.2},
                "geometry": {"type": "Polygon", "coordinates": [[[x, y, PHONE_ALTITUDE] for x, y in ring]]},
            }
        )
    features.append(
        {
            "type": "Feature",
            "properties": {"name": "Gate"},
            "geometry": {"type": "Point", "coordinates": [18.8598, -33.8601, PHONE_ALTITUDE]},
        }
    )
    path = folder / "walked.geojson"
    path.write_text(json.dumps({"type": "FeatureCollection", "features": features}), encoding="utf-8")
    return path


def kml_text(corners: dict, *, with_extras: bool = True) -> str:
    """KML 2.2 as a desktop globe tool saves it: a Folder of placemarks, altitude 0, a pin and a track."""
    marks = []
    for name, (x0, y0, x1, y1) in corners.items():
        ring = " ".join(f"{x},{y},0" for x, y in [(x0, y0), (x1, y0), (x1, y1), (x0, y1), (x0, y0)])
        marks.append(
            f"""    <Placemark>
      <name>{name}</name>
      <ExtendedData><Data name="variety"><value>Pinotage</value></Data></ExtendedData>
      <Polygon><outerBoundaryIs><LinearRing><coordinates>
        {ring}
      </coordinates></LinearRing></outerBoundaryIs></Polygon>
    </Placemark>"""
        )
    if with_extras:
        marks.append(
            """    <Placemark><name>Gate</name><Point><coordinates>18.8598,-33.8601,0</coordinates></Point></Placemark>
    <Placemark><name>Walk to creek</name><LineString><coordinates>
      18.8598,-33.8601,0 18.8640,-33.8590,0</coordinates></LineString></Placemark>"""
        )
    body = "\n".join(marks)
    return f"""<?xml version="1.0" encoding="UTF-8"?>
<kml xmlns="http://www.opengis.net/kml/2.2" xmlns:gx="http://www.google.com/kml/ext/2.2">
<Document>
  <name>Farm blocks</name>
  <Folder>
    <name>Blocks</name>
{body}
  </Folder>
</Document>
</kml>
"""


def kml_file(folder: Path) -> Path:
    path = folder / "blocks.kml"
    path.write_text(kml_text(PHONE), encoding="utf-8")
    return path


def kmz_file(folder: Path) -> Path:
    """A KMZ: the document as doc.kml in a zip (with an image beside it, as exports often have)."""
    path = folder / "blocks.kmz"
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as archive:
        archive.writestr("doc.kml", kml_text(PHONE))
        archive.writestr("files/icon.png", b"\x89PNG\r\n\x1a\n")
    return path
