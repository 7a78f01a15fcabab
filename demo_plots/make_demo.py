"""Build the invented demo estate (Tallowmere Estate) as GeoJSON.

Everything here is invented for demonstration: the estate, its block names,
varieties and row layouts. Coordinates sit on farmland in a winegrowing valley
so the map looks plausible; they describe no real property.

Run: python demo_plots/make_demo.py  (rewrites the two GeoJSON files beside it)
"""

from __future__ import annotations

import json
from pathlib import Path

import shapely
from pyproj import Transformer
from shapely import affinity

HERE = Path(__file__).resolve().parent
# Local frame: metres east/north of an invented corner, in WGS84 / UTM zone 34S.
ORIGIN_E, ORIGIN_N = 305_400.0, 6_250_800.0
TO_WGS = Transformer.from_crs("EPSG:32734", "EPSG:4326", always_xy=True)


def quad(x0, y0, w, h, skew=0.0, rot=0.0):
    """A slightly irregular four-sided block, metres in the local frame."""
    poly = shapely.Polygon(
        [(x0, y0), (x0 + w, y0 + skew), (x0 + w - skew, y0 + h), (x0 + skew / 2, y0 + h - skew)]
    )
    return affinity.rotate(poly, rot, origin="centroid")


def blocks():
    vine = {"row_spacing_m": 2.5, "plant_spacing_m": 1.2}
    rows = []

    def add(block, name, variety, geom, crop, **attrs):
        rows.append(
            {"block": block, "name": name, "variety": variety, "crop": crop, **attrs, "geometry": geom}
        )

    add(
        "V01",
        "Windpomp Syrah",
        "Syrah",
        quad(0, 0, 260, 180, 12, 3),
        "wine grape",
        **vine,
        row_bearing_deg=15.0,
    )
    add(
        "V02",
        "Upper Syrah",
        "Syrah",
        quad(280, 0, 220, 200, 8, -2),
        "wine grape",
        **vine,
        row_bearing_deg=15.0,
    )
    dam = shapely.Point(640, 95).buffer(38)
    add(
        "V03",
        "Dam Chenin",
        "Chenin blanc",
        quad(520, 0, 240, 210, 10).difference(dam),
        "wine grape",
        row_spacing_m=2.7,
        plant_spacing_m=1.3,
        row_bearing_deg=100.0,
    )
    add(
        "V04",
        "Koppie Chenin",
        "Chenin blanc",
        quad(0, 200, 300, 170, 15, 4),
        "wine grape",
        row_spacing_m=2.7,
        plant_spacing_m=1.3,
        row_bearing_deg=95.0,
    )
    cab = shapely.union_all([quad(320, 220, 180, 160, 6), quad(520, 230, 150, 150, 5)])
    add(
        "V05",
        "Split Cabernet",
        "Cabernet Sauvignon",
        cab,
        "wine grape",
        row_spacing_m=2.5,
        plant_spacing_m=1.5,
        row_bearing_deg=0.0,
    )
    add(
        "V06",
        "Long Cabernet",
        "Cabernet Sauvignon",
        quad(690, 230, 120, 330, 9, -3),
        "wine grape",
        row_spacing_m=2.5,
        plant_spacing_m=1.5,
        row_bearing_deg=2.0,
    )
    add(
        "V07",
        "Kloof Pinotage",
        "Pinotage",
        quad(0, 390, 250, 160, 10, 2),
        "wine grape",
        row_spacing_m=2.4,
        plant_spacing_m=1.0,
        row_bearing_deg=120.0,
    )
    add(
        "V08",
        "Seabreeze Sauvignon",
        "Sauvignon blanc",
        quad(270, 400, 260, 150, 7),
        "wine grape",
        row_spacing_m=2.4,
        plant_spacing_m=1.2,
        row_bearing_deg=30.0,
    )
    add(
        "V09",
        "Trial Syrah",
        "Syrah",
        quad(545, 400, 38, 34, 2),
        "wine grape",
        row_spacing_m=2.5,
        plant_spacing_m=1.0,
        row_bearing_deg=15.0,
    )
    add(
        "O01",
        "Homestead Apples",
        "Golden Delicious",
        quad(0, 570, 300, 190, 10, 1),
        "apple",
        row_spacing_m=4.0,
        plant_spacing_m=1.5,
        row_bearing_deg=0.0,
    )
    add(
        "O02",
        "River Pears",
        "Packham's Triumph",
        quad(320, 580, 240, 200, 12, -4),
        "pear",
        row_spacing_m=4.5,
        plant_spacing_m=2.0,
        row_bearing_deg=175.0,
    )
    add(
        "O03",
        "Stone Plums",
        "Laetitia",
        quad(580, 580, 210, 170, 8),
        "plum",
        row_spacing_m=4.5,
        plant_spacing_m=1.8,
        row_bearing_deg=178.0,
    )
    add("F01", "Bottom Land", "Wheat", quad(-40, 790, 520, 330, 25, 2), "arable")
    add("F02", "Lucerne Camp", "Lucerne", quad(500, 800, 330, 300, 18, -1), "arable")
    return rows


def exclusions():
    return [
        {"name": "Wet spot", "kind": "wet", "geometry": shapely.Point(120, 960).buffer(35)},
        {"name": "Pack shed", "kind": "building", "geometry": shapely.box(120, 640, 170, 680)},
        {
            "name": "Farm track",
            "kind": "track",
            "geometry": shapely.LineString([(500, 790), (690, 1090)]).buffer(4),
        },
    ]


def to_feature(row: dict) -> dict:
    geom = shapely.transform(
        affinity.translate(row.pop("geometry"), ORIGIN_E, ORIGIN_N),
        lambda xy: __import__("numpy").column_stack(TO_WGS.transform(xy[:, 0], xy[:, 1])),
    )
    geom = shapely.set_precision(geom, 1e-7)
    return {"type": "Feature", "properties": row, "geometry": shapely.geometry.mapping(geom)}


def write(name: str, rows: list[dict]) -> None:
    collection = {"type": "FeatureCollection", "features": [to_feature(dict(r)) for r in rows]}
    text = json.dumps(collection, indent=1) + "\n"
    # The package carries an identical copy so an installed fieldplan can run its demo.
    for folder in (HERE, HERE.parent / "fieldplan" / "data" / "demo"):
        folder.mkdir(parents=True, exist_ok=True)
        (folder / name).write_text(text, encoding="utf-8")


if __name__ == "__main__":
    write("estate_blocks.geojson", blocks())
    write("estate_exclusions.geojson", exclusions())
