"""points.gpx: GPX 1.1 waypoints (and planned routes) for hand-held GPS units.

Waypoints are named by point id; ``desc`` carries the block, stratum, row/plant,
units and instructions when the plan has them. Coordinates are WGS84 with the
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
import shapely

from fieldplan.write.html_map import optional_layer, plan_caption
from fieldplan.write.safe import atomic_write_bytes
from fieldplan.write.tables import LONLAT_DECIMALS, points_lonlat

__all__ = ["GPX_NS", "xml_text", "point_description", "gpx_bytes", "write_gpx", "gpx_writer"]

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


def point_description(points) -> list[str]:
    """One line per point: block, stratum, row/plant, units, instructions (when present)."""
    parts: list[list[str]] = [[] for _ in range(len(points))]
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
        for i, value in enumerate(points[column].tolist()):
            text = xml_text(value)
            if text:
                parts[i].append(label + text)
    return ["; ".join(p) for p in parts]


def _coord(value: float) -> str:
    return f"{value:.{LONLAT_DECIMALS}f}"


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
        f"seed {caption['seed']}; {caption['date']}; {len(plan.points)} points"
    )

    points = plan.points
    lonlat = points_lonlat(points)
    ids = points["point_id"].tolist()
    descs = point_description(points)
    strata = points["stratum"].tolist() if "stratum" in points.columns else [None] * len(points)
    # GPX 1.1 schema order inside wpt: ... name, cmt, desc, src, link, sym, type ...
    for (lon, lat), pid, desc, stratum in zip(lonlat, ids, descs, strata, strict=True):
        wpt = ET.SubElement(root, "wpt", {"lat": _coord(lat), "lon": _coord(lon)})
        ET.SubElement(wpt, "name").text = xml_text(pid)
        if desc:
            ET.SubElement(wpt, "desc").text = desc
        ET.SubElement(wpt, "sym").text = "Flag"
        if xml_text(stratum):
            ET.SubElement(wpt, "type").text = xml_text(stratum)

    routes = routes if routes is not None else optional_layer(plan, "routes")
    if routes is not None and len(routes):
        wgs = routes.to_crs(4326)
        crews = wgs["crew"].tolist() if "crew" in wgs.columns else list(range(1, len(wgs) + 1))
        for crew, geom in zip(crews, wgs.geometry.values, strict=True):
            if geom is None or shapely.is_empty(geom):
                continue
            rte = ET.SubElement(root, "rte")
            ET.SubElement(rte, "name").text = xml_text(f"Crew {xml_text(crew)}")
            coords = np.round(shapely.get_coordinates(geom), LONLAT_DECIMALS)
            for lon, lat in coords:
                ET.SubElement(rte, "rtept", {"lat": _coord(lat), "lon": _coord(lon)})

    ET.indent(root, space=" ")
    return ET.tostring(root, encoding="utf-8", xml_declaration=True) + b"\n"


def write_gpx(plan: Any, path: Path | str, *, routes=None) -> Path:
    """Write ``points.gpx`` (atomically) and return its path."""
    path = Path(path)
    atomic_write_bytes(path, gpx_bytes(plan, routes=routes))
    return path


def gpx_writer(plan: Any, folder: Path) -> None:
    """Plan-folder writer (``fieldplan.store.WRITERS``): ``points.gpx``."""
    write_gpx(plan, Path(folder) / "points.gpx")
