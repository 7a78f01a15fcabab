"""points.kml: OGC KML 2.2 with blocks, exclusions and sample points.

One Placemark per point (named by point id, block and stratum in ExtendedData),
block and exclusion outlines as Polygons. Styles use the same colour-blind-safe
palette as the map; no icon URLs, so viewers fall back to their own pin. Unused
spares go in a Folder of their own, "Spares (use only when a point is
inaccessible)", with a grey, smaller pin.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import shapely

from fieldplan.words import plural
from fieldplan.write.gpx import point_description, spare_mask, text_column, xml_escape, xml_text
from fieldplan.write.html_map import plan_caption, stratum_styles
from fieldplan.write.safe import atomic_write_bytes
from fieldplan.write.tables import LONLAT_DECIMALS, points_lonlat

__all__ = ["KML_NS", "SPARES_FOLDER", "kml_colour", "kml_bytes", "placemarks_xml", "write_kml", "kml_writer"]

KML_NS = "http://www.opengis.net/kml/2.2"
_DATA_COLUMNS = ("block", "stratum", "design", "row", "plant", "units", "status")
SPARES_FOLDER = "Spares (use only when a point is inaccessible)"
_SPARE_STYLE = "spare"


def kml_colour(hex_rgb: str, *, alpha: int = 255) -> str:
    """``#RRGGBB`` to KML's ``aabbggrr`` (OGC 07-147r2, kml:colorType)."""
    rgb = hex_rgb.lstrip("#")
    return f"{alpha:02x}{rgb[4:6]}{rgb[2:4]}{rgb[0:2]}".lower()


def _coords_text(coords: np.ndarray) -> str:
    # Python floats format several times faster than numpy scalars.
    return " ".join([f"{x:.{LONLAT_DECIMALS}f},{y:.{LONLAT_DECIMALS}f}" for x, y in coords.tolist()])


def _polygon(parent: ET.Element, polygon) -> None:
    poly = ET.SubElement(parent, "Polygon")
    rings = [("outerBoundaryIs", polygon.exterior)] + [
        ("innerBoundaryIs", ring) for ring in polygon.interiors
    ]
    for tag, ring in rings:
        coords = np.round(shapely.get_coordinates(ring), LONLAT_DECIMALS)
        boundary = ET.SubElement(poly, tag)
        ET.SubElement(ET.SubElement(boundary, "LinearRing"), "coordinates").text = _coords_text(coords)


def _area_placemark(folder: ET.Element, name: str, description: str, style: str, geom) -> None:
    if geom is None or shapely.is_empty(geom):
        return
    mark = ET.SubElement(folder, "Placemark")
    ET.SubElement(mark, "name").text = xml_text(name)
    if description:
        ET.SubElement(mark, "description").text = xml_text(description)
    ET.SubElement(mark, "styleUrl").text = f"#{style}"
    polygons = list(getattr(geom, "geoms", [geom]))
    parent = ET.SubElement(mark, "MultiGeometry") if len(polygons) > 1 else mark
    for polygon in polygons:
        if polygon.geom_type == "Polygon" and not polygon.is_empty:
            _polygon(parent, polygon)


def _style(
    doc: ET.Element,
    sid: str,
    *,
    icon: str | None = None,
    line: str | None = None,
    fill: str | None = None,
    scale: str = "0.8",
) -> None:
    style = ET.SubElement(doc, "Style", {"id": sid})
    if icon is not None:
        icon_style = ET.SubElement(style, "IconStyle")
        ET.SubElement(icon_style, "color").text = kml_colour(icon)
        ET.SubElement(icon_style, "scale").text = scale
    if line is not None:
        line_style = ET.SubElement(style, "LineStyle")
        ET.SubElement(line_style, "color").text = kml_colour(line)
        ET.SubElement(line_style, "width").text = "2"
    if line is not None or fill is not None:
        poly_style = ET.SubElement(style, "PolyStyle")
        if fill is None:
            ET.SubElement(poly_style, "fill").text = "0"
        else:
            ET.SubElement(poly_style, "color").text = kml_colour(fill, alpha=0x80)


def kml_bytes(plan: Any) -> bytes:
    """The KML 2.2 document for ``plan``."""
    from fieldplan.safety import cautions_text, plan_cautions

    caption = plan_caption(plan)
    root = ET.Element("kml", {"xmlns": KML_NS})
    doc = ET.SubElement(root, "Document")
    ET.SubElement(doc, "name").text = xml_text(f"Sampling plan {caption['plan_id']}")
    ET.SubElement(doc, "description").text = xml_text(
        f"Seed {caption['seed']}; {caption['date']}; {plural(len(plan.points), 'point')}.\n"
        + cautions_text(plan_cautions(plan))
    )
    points = plan.points
    styles = stratum_styles(points["stratum"].astype(str)) if len(points) else {}
    style_ids = {name: f"stratum-{i}" for i, name in enumerate(styles)}
    _style(doc, "block", line="#333333")
    _style(doc, "exclusion", line="#555555", fill="#999999")
    for name, sid in style_ids.items():
        _style(doc, sid, icon=styles[name]["colour"])
    # Grey and smaller than any stratum pin, and in a folder of their own: a spare is not a plan point.
    _style(doc, _SPARE_STYLE, icon="#8c8c8c", scale="0.6")

    blocks_folder = ET.SubElement(doc, "Folder")
    ET.SubElement(blocks_folder, "name").text = "Blocks"
    if len(plan.blocks):
        blocks = plan.blocks.to_crs(4326)
        varieties = blocks["variety"].tolist() if "variety" in blocks else [None] * len(blocks)
        for name, variety, geom in zip(
            blocks["block"].tolist(), varieties, blocks.geometry.values, strict=True
        ):
            desc = f"Variety {xml_text(variety)}" if xml_text(variety) else ""
            _area_placemark(blocks_folder, f"Block {xml_text(name)}", desc, "block", geom)

    exclusions = getattr(plan, "exclusions", None)
    if exclusions is not None and len(exclusions):
        ex_folder = ET.SubElement(doc, "Folder")
        ET.SubElement(ex_folder, "name").text = "Exclusions (not sampled)"
        wgs = exclusions.to_crs(4326)
        names = wgs["name"].tolist() if "name" in wgs else [""] * len(wgs)
        for name, geom in zip(names, wgs.geometry.values, strict=True):
            _area_placemark(ex_folder, f"Excluded: {xml_text(name)}", "", "exclusion", geom)

    spare = spare_mask(points)
    pts_folder = ET.SubElement(doc, "Folder")
    ET.SubElement(pts_folder, "name").text = "Sample points"
    marker, spare_marker = "<fieldplan-points />", "<fieldplan-spares />"
    ET.SubElement(pts_folder, "fieldplan-points")
    if spare.any():
        spare_folder = ET.SubElement(doc, "Folder")
        ET.SubElement(spare_folder, "name").text = SPARES_FOLDER
        ET.SubElement(spare_folder, "fieldplan-spares")
    ET.indent(root, space=" ")
    text = ET.tostring(root, encoding="unicode")
    text = text.replace("   " + marker + "\n", placemarks_xml(points[~spare], style_ids), 1)
    if spare.any():
        spares_xml = placemarks_xml(points[spare], {}, style=_SPARE_STYLE)
        text = text.replace("   " + spare_marker + "\n", spares_xml, 1)
    return ('<?xml version="1.0" encoding="UTF-8"?>\n' + text + "\n").encode("utf-8")


def placemarks_xml(points, style_ids: dict[str, str], *, style: str | None = None) -> str:
    """One point Placemark per row of ``points`` as indented KML text (built column-wise).

    Each point is styled by its stratum through ``style_ids``, or all by ``style`` when given.
    """
    if len(points) == 0:
        return ""
    lonlat = points_lonlat(points)
    coords = pd.Series(
        np.char.add(
            np.char.add(np.char.mod(f"%.{LONLAT_DECIMALS}f", lonlat[:, 0]), ","),
            np.char.mod(f"%.{LONLAT_DECIMALS}f", lonlat[:, 1]),
        ),
        dtype=object,
    )
    names = text_column(points["point_id"])
    descs = pd.Series(point_description(points), dtype=object)
    styles = (
        pd.Series([style] * len(points), dtype=object)
        if style is not None
        else points["stratum"].astype(str).reset_index(drop=True).map(style_ids)
    )
    extended = pd.Series([""] * len(points), dtype=object)
    for column in (c for c in _DATA_COLUMNS if c in points.columns):
        texts = text_column(points[column])
        data = (
            '     <Data name="'
            + column
            + '">\n      <value>'
            + xml_escape(texts)
            + "</value>\n     </Data>\n"
        )
        extended = extended + data.where(texts != "", "")
    # KML 2.2 schema order in a Placemark: name, description, styleUrl, ExtendedData, geometry.
    rows = (
        "   <Placemark>\n"
        + ("    <name>" + xml_escape(names) + "</name>\n").where(names != "", "")
        + ("    <description>" + xml_escape(descs) + "</description>\n").where(descs != "", "")
        + "    <styleUrl>#"
        + styles
        + "</styleUrl>\n"
        + "    <ExtendedData>\n"
        + extended
        + "    </ExtendedData>\n"
        + "    <Point>\n     <coordinates>"
        + coords
        + "</coordinates>\n    </Point>\n"
        + "   </Placemark>\n"
    )
    return "".join(rows.tolist())


def write_kml(plan: Any, path: Path | str) -> Path:
    """Write ``points.kml`` (atomically) and return its path."""
    path = Path(path)
    atomic_write_bytes(path, kml_bytes(plan))
    return path


def kml_writer(plan: Any, folder: Path) -> None:
    """Plan-folder writer (``fieldplan.store.WRITERS``): ``points.kml``."""
    write_kml(plan, Path(folder) / "points.kml")
