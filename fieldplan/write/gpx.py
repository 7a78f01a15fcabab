"""points.gpx: GPX 1.1 waypoints (and planned routes) for hand-held GPS units.

Waypoints are named by point id; ``desc`` carries the block, stratum, row/plant,
units and instructions when the plan has them. Unused spares keep their point id
as name (recorded waypoints are matched by it) but get ``<type>spare</type>`` and
a ``desc`` starting "SPARE #rank - use only when told". Coordinates are WGS84 with the
same rounding as ``points.geojson``. Written with :mod:`xml.etree.ElementTree`,
which escapes text and attributes; characters XML 1.0 forbids are dropped.
"""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import shapely

from fieldplan.words import plural
from fieldplan.write.html_map import optional_layer, plan_caption
from fieldplan.write.safe import atomic_write_bytes
from fieldplan.write.tables import LONLAT_DECIMALS, points_lonlat

__all__ = [
    "GPX_NS",
    "xml_text",
    "xml_escape",
    "text_column",
    "point_description",
    "spare_mask",
    "spare_note",
    "waypoints_xml",
    "routes_xml",
    "gpx_bytes",
    "write_gpx",
    "gpx_writer",
]

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


def write_gpx(plan: Any, path: Path | str, *, routes=None) -> Path:
    """Write ``points.gpx`` (atomically) and return its path."""
    path = Path(path)
    atomic_write_bytes(path, gpx_bytes(plan, routes=routes))
    return path


def gpx_writer(plan: Any, folder: Path) -> None:
    """Plan-folder writer (``fieldplan.store.WRITERS``): ``points.gpx``."""
    write_gpx(plan, Path(folder) / "points.gpx")
