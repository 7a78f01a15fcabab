"""The KML and GPX writers as they were built with ElementTree and pandas string columns.

Frozen here as the reference the array-built writers in ``fieldplan.write.kml`` and
``fieldplan.write.gpx`` must match byte for byte. Not used by fieldplan itself.
"""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET
from typing import Any

import numpy as np
import pandas as pd
import shapely

from fieldplan.words import plural
from fieldplan.write.html_map import optional_layer, plan_caption, stratum_styles
from fieldplan.write.tables import LONLAT_DECIMALS, points_lonlat

GPX_NS = "http://www.topografix.com/GPX/1/1"
_GPX_XSD = "http://www.topografix.com/GPX/1/1/gpx.xsd"
# XML 1.0 section 2.2 "Char": everything else cannot appear in a document at all.
_NOT_XML_CHAR = re.compile("[^\u0009\u000a\u000d\u0020-\ud7ff\ue000-\ufffd\U00010000-\U0010ffff]")


def xml_text(value: Any) -> str:
    """Text for an XML element: ``None``/NaN become ``""`` and forbidden characters go."""
    if value is None:
        return ""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float):
        if not math.isfinite(value):
            return ""
        if value.is_integer():
            value = int(value)
    return _NOT_XML_CHAR.sub("", str(value))


_XML_SPECIAL = re.compile('[&<>"]')


def text_column(values) -> pd.Series:
    """:func:`xml_text` over a column, as a Series of str (not yet escaped)."""
    column = pd.Series(values).reset_index(drop=True)
    if pd.api.types.is_string_dtype(column.dtype) and pd.api.types.infer_dtype(column) in ("string", "empty"):
        # All text: one search over the column decides whether any cell needs xml_text.
        cells = column.to_numpy(dtype=object, na_value="")
        cells = np.where(pd.isna(cells), "", cells).astype(object)
        if _NOT_XML_CHAR.search("".join(cells.tolist())) is None:
            return pd.Series(cells, dtype=object)
    return pd.Series(values, dtype=object).reset_index(drop=True).map(xml_text).astype(object)


def xml_escape(texts: pd.Series) -> pd.Series:
    """Escape ``& < > "`` for element text and double-quoted attributes (XML 1.0 section 2.4)."""
    if _XML_SPECIAL.search("".join(texts.tolist())) is None:
        return texts
    return (
        texts.str.replace("&", "&amp;", regex=False)
        .str.replace("<", "&lt;", regex=False)
        .str.replace(">", "&gt;", regex=False)
        .str.replace('"', "&quot;", regex=False)
    )


def point_description(points) -> list[str]:
    """One line per point: block, stratum, row/plant, units, instructions (when present).

    Unused spares start with :func:`spare_note`, so no one mistakes one for a planned point.
    """
    result = spare_note(points)
    labels = (
        ("block", "Block "),
        ("stratum", "stratum "),
        ("row", "row "),
        ("plant", "plant "),
        ("units", "units "),
        ("instructions", ""),
    )
    for column, label in labels:
        if column not in points.columns:
            continue
        text = text_column(points[column])
        part = (label + text).where(text != "", "")
        joined = (result + "; " + part).where(part != "", result)
        result = part.where(result == "", joined)
    return result.tolist()


def spare_mask(points) -> np.ndarray:
    """Boolean per point: an unused spare (``status == "spare"``)."""
    if "status" not in points.columns:
        return np.zeros(len(points), dtype=bool)
    return points["status"].astype(str).str.lower().eq("spare").to_numpy()


def spare_note(points) -> pd.Series:
    """ "SPARE #rank - use only when told" for unused spares, ``""`` for every other point."""
    spare = pd.Series(spare_mask(points), dtype=bool)
    if "spare_rank" in points.columns:
        rank = pd.to_numeric(points["spare_rank"], errors="coerce").fillna(0).to_numpy()
        whole = np.char.mod("%d", np.maximum(rank, 0).astype(np.int64))
        rank_text = pd.Series(np.where(rank > 0, np.char.add(" #", whole), ""), dtype=object)
    else:
        rank_text = pd.Series([""] * len(points), dtype=object)
    note = "SPARE" + rank_text + " \u2014 use only when told"
    return note.where(spare, "").astype(object)


def _element(tag: str, texts: pd.Series, indent: str) -> pd.Series:
    """``<tag>text</tag>`` lines, empty where the text is empty."""
    return (indent + f"<{tag}>" + xml_escape(texts) + f"</{tag}>\n").where(texts != "", "")


def _placeholder(root: ET.Element, parent: ET.Element) -> tuple[str, ET.Element]:
    # Per-point elements are built as columns of text (fast for many points) and put in
    # at this empty element; input text is escaped, so it cannot spell the marker.
    return "<fieldplan-points />", ET.SubElement(parent, "fieldplan-points")


def waypoints_xml(points) -> str:
    """All ``wpt`` elements of ``points`` as indented GPX 1.1 text."""
    if len(points) == 0:
        return ""
    lonlat = points_lonlat(points)
    names = text_column(points["point_id"])
    descs = pd.Series(point_description(points), dtype=object)
    notes = spare_note(points)
    strata = (
        text_column(points["stratum"])
        if "stratum" in points.columns
        else pd.Series([""] * len(points), dtype=object)
    )
    # The GPX 1.1 type element classifies a waypoint; a spare is a different kind of stop.
    strata = strata.where(notes == "", "spare")
    # GPX 1.1 schema order inside wpt: ... name, cmt, desc, src, link, sym, type ...
    rows = (
        " <wpt "
        + _lat_lon_attrs(lonlat)
        + ">\n"
        + _element("name", names, "  ")
        + _element("desc", descs, "  ")
        + "  <sym>Flag</sym>\n"
        + _element("type", strata, "  ")
        + " </wpt>\n"
    )
    return "".join(rows.tolist())


def _lat_lon_attrs(coords: np.ndarray) -> pd.Series:
    lat = pd.Series(np.char.mod(f"%.{LONLAT_DECIMALS}f", coords[:, 1]), dtype=object)
    lon = pd.Series(np.char.mod(f"%.{LONLAT_DECIMALS}f", coords[:, 0]), dtype=object)
    return 'lat="' + lat + '" lon="' + lon + '"'


def routes_xml(routes) -> str:
    """One ``rte`` per route line (``crew`` column names it), as indented GPX 1.1 text."""
    if routes is None or len(routes) == 0:
        return ""
    wgs = routes.to_crs(4326)
    crews = wgs["crew"].tolist() if "crew" in wgs.columns else list(range(1, len(wgs) + 1))
    parts = []
    for crew, geom in zip(crews, wgs.geometry.values, strict=True):  # one per crew
        if geom is None or shapely.is_empty(geom):
            continue
        coords = np.round(shapely.get_coordinates(geom), LONLAT_DECIMALS)
        name = xml_escape(pd.Series([f"Crew {xml_text(crew)}"], dtype=object)).iloc[0]
        points = "".join(("  <rtept " + _lat_lon_attrs(coords) + " />\n").tolist())
        parts.append(f" <rte>\n  <name>{name}</name>\n{points} </rte>\n")
    return "".join(parts)


def gpx_bytes(plan: Any, *, routes=None) -> bytes:
    """The GPX 1.1 document for ``plan`` (waypoints, plus one ``rte`` per route line)."""
    from fieldplan import __version__

    caption = plan_caption(plan)
    root = ET.Element(
        "gpx",
        {
            "xmlns": GPX_NS,
            "xmlns:xsi": "http://www.w3.org/2001/XMLSchema-instance",
            "xsi:schemaLocation": f"{GPX_NS} {_GPX_XSD}",
            "version": "1.1",
            "creator": f"fieldplan {__version__}",
        },
    )
    metadata = ET.SubElement(root, "metadata")
    ET.SubElement(metadata, "name").text = xml_text(f"Sampling plan {caption['plan_id']}")
    ET.SubElement(metadata, "desc").text = xml_text(
        f"seed {caption['seed']}; {caption['date']}; {plural(len(plan.points), 'point')}"
    )
    marker, _ = _placeholder(root, root)
    ET.indent(root, space=" ")
    text = ET.tostring(root, encoding="unicode")
    routes = routes if routes is not None else optional_layer(plan, "routes")
    # GPX 1.1 schema order: metadata, wpt*, rte*, trk*.
    points = plan.points
    if "status" in points.columns:
        # Points marked inaccessible must not lead anyone there (fieldplan mark).
        points = points[~points["status"].astype(str).str.lower().eq("inaccessible").to_numpy()]
    body = waypoints_xml(points) + routes_xml(routes)
    text = text.replace(" " + marker + "\n", body, 1)
    return ('<?xml version="1.0" encoding="UTF-8"?>\n' + text + "\n").encode("utf-8")


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
