"""points.gpx: GPX 1.1 waypoints (and planned routes) for hand-held GPS units.

Waypoints are named by point id; ``desc`` carries the block, stratum, row/plant,
units and instructions when the plan has them. Unused spares keep their point id
as name (recorded waypoints are matched by it) but get ``<type>spare</type>`` and
a ``desc`` starting "SPARE #rank - use only when told". Coordinates are WGS84 with the
same rounding as ``points.geojson``.

The text is built from columns in one pass (:func:`fill_rows`: one ``%`` format of a
row template over all rows, numbers formatted there too), not element by element.
Every text from the input goes through :func:`xml_text` (characters XML 1.0 forbids
are dropped) and is escaped (:func:`xml_escape`), so no name can close an element or
open markup. This module also holds those text-column helpers for ``points.kml``.
"""

from __future__ import annotations

import math
import re
from itertools import chain
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
    "text_escape",
    "text_escapes",
    "text_column",
    "fill_rows",
    "element_lines",
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
    """Text for an XML element: ``None``/NaN/``pd.NA`` become ``""`` and forbidden characters go."""
    if value is None or value is pd.NA:
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
# Rows of a template are formatted this many at a time: the template repeated stays small.
_CHUNK = 16384
#: Between the texts of a column joined into one string; xml_text drops it, so no text holds it.
_SEP = "\x00"


def text_column(values) -> np.ndarray:
    """:func:`xml_text` over a column, as an object array of str (not yet escaped)."""
    column = pd.Series(values).reset_index(drop=True)
    n = len(column)
    if pd.api.types.is_string_dtype(column.dtype) and pd.api.types.infer_dtype(column) in ("string", "empty"):
        # All text: one search over the column decides whether any cell needs xml_text.
        cells = column.to_numpy(dtype=object, na_value="")
        cells = np.where(pd.isna(cells), "", cells).astype(object)
        if _NOT_XML_CHAR.search("".join(cells.tolist())) is None:
            return cells
    kind = column.dtype.kind if isinstance(column.dtype, np.dtype) else ""
    if kind and kind in "iu":
        return column.to_numpy().astype(str).astype(object)  # str(int), as xml_text gives
    if kind == "f":
        # xml_text: NaN and infinities give "", whole numbers print as int, others as str(float).
        data = column.to_numpy()
        out = np.full(n, "", dtype=object)
        finite = np.isfinite(data)
        whole = finite & (np.floor(data) == data)
        out[whole] = np.char.mod("%d", data[whole]).astype(object)
        part = finite & ~whole
        out[part] = list(map(str, data[part].tolist()))
        return out
    out = np.empty(n, dtype=object)
    out[:] = [xml_text(v) for v in column.tolist()]  # mixed objects: rare, and exact
    return out


def _escaped(texts, pairs: tuple[tuple[str, str], ...]) -> np.ndarray:
    texts = np.asarray(texts, dtype=object)
    if len(texts) == 0:
        return texts
    joined = _SEP.join(texts.tolist())
    if not any(old in joined for old, _ in pairs):
        return texts
    if joined.count(_SEP) != len(texts) - 1:  # a text holding the separator: one at a time
        out = np.empty(len(texts), dtype=object)
        out[:] = [_escape_one(t, pairs) for t in texts.tolist()]
        return out
    out = np.empty(len(texts), dtype=object)
    out[:] = _escape_one(joined, pairs).split(_SEP)
    return out


def _escape_one(text: str, pairs: tuple[tuple[str, str], ...]) -> str:
    for old, new in pairs:
        text = text.replace(old, new)
    return text


_ELEMENT_ESCAPES = (("&", "&amp;"), ("<", "&lt;"), (">", "&gt;"))
_ATTRIBUTE_ESCAPES = (*_ELEMENT_ESCAPES, ('"', "&quot;"))


def xml_escape(texts) -> np.ndarray:
    """Escape ``& < > "`` for element text and double-quoted attributes (XML 1.0 section 2.4)."""
    return _escaped(texts, _ATTRIBUTE_ESCAPES)


def text_escape(text: str) -> str:
    """Escape ``& < >`` in one element text (as :mod:`xml.etree.ElementTree` writes text)."""
    return _escape_one(text, _ELEMENT_ESCAPES)


def text_escapes(texts) -> np.ndarray:
    """:func:`text_escape` over a column of texts (quotes kept, as ElementTree writes text)."""
    return _escaped(texts, _ELEMENT_ESCAPES)


def fill_rows(template: str, *columns) -> str:
    """``template`` once per row, its ``%`` fields taken from ``columns`` in turn.

    One ``%`` format per chunk of rows does the work (numbers are formatted by the
    template's ``%.8f`` fields), so text is built without a Python step per row. Text
    columns must hold ``str``, number columns Python numbers (``ndarray.tolist()``).
    """
    columns = [c.tolist() if isinstance(c, np.ndarray) else list(c) for c in columns]
    n = len(columns[0]) if columns else 0
    parts = []
    for start in range(0, n, _CHUNK):
        rows = min(_CHUNK, n - start)
        values = tuple(chain.from_iterable(zip(*(c[start : start + rows] for c in columns), strict=True)))
        parts.append((template * rows) % values)
    return "".join(parts)


def element_lines(tag: str, texts, indent: str) -> np.ndarray:
    """``<tag>text</tag>`` lines of escaped ``texts``; ``""`` where the text is empty."""
    texts = np.asarray(texts, dtype=object)
    lines = indent + f"<{tag}>" + xml_escape(texts) + f"</{tag}>\n"
    return np.where(texts != "", lines, "").astype(object)


def point_description(points) -> np.ndarray:
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
        some = text != ""
        part = np.where(some, label + text, "")
        result = np.where(result == "", part, np.where(some, result + "; " + part, result))
    return np.asarray(result, dtype=object)


def spare_mask(points) -> np.ndarray:
    """Boolean per point: an unused spare (``status == "spare"``)."""
    if "status" not in points.columns:
        return np.zeros(len(points), dtype=bool)
    return points["status"].astype(str).str.lower().eq("spare").to_numpy()


def spare_note(points) -> np.ndarray:
    """ "SPARE #rank - use only when told" for unused spares, ``""`` for every other point."""
    spare = spare_mask(points)
    if "spare_rank" in points.columns:
        rank = pd.to_numeric(points["spare_rank"], errors="coerce").fillna(0).to_numpy()
        whole = np.char.mod("%d", np.maximum(rank, 0).astype(np.int64))
        rank_text = np.where(rank > 0, np.char.add(" #", whole), "").astype(object)
    else:
        rank_text = np.full(len(points), "", dtype=object)
    note = "SPARE" + rank_text + " \u2014 use only when told"
    return np.where(spare, note, "").astype(object)


_COORD = f"%.{LONLAT_DECIMALS}f"
# GPX 1.1 schema order inside wpt: ... name, cmt, desc, src, link, sym, type ...
_WPT = f' <wpt lat="{_COORD}" lon="{_COORD}">\n%s%s  <sym>Flag</sym>\n%s </wpt>\n'
_RTEPT = f'  <rtept lat="{_COORD}" lon="{_COORD}" />\n'


def waypoints_xml(points) -> str:
    """All ``wpt`` elements of ``points`` as indented GPX 1.1 text."""
    if len(points) == 0:
        return ""
    lonlat = points_lonlat(points)
    names = text_column(points["point_id"])
    descs = point_description(points)
    notes = spare_note(points)
    strata = (
        text_column(points["stratum"])
        if "stratum" in points.columns
        else np.full(len(points), "", dtype=object)
    )
    # The GPX 1.1 type element classifies a waypoint; a spare is a different kind of stop.
    strata = np.where(notes == "", strata, "spare").astype(object)
    return fill_rows(
        _WPT,
        lonlat[:, 1],
        lonlat[:, 0],
        element_lines("name", names, "  "),
        element_lines("desc", descs, "  "),
        element_lines("type", strata, "  "),
    )


def routes_xml(routes) -> str:
    """One ``rte`` per route line (``crew`` column names it), as indented GPX 1.1 text."""
    if routes is None or len(routes) == 0:
        return ""
    wgs = routes.to_crs(4326)
    crews = wgs["crew"].tolist() if "crew" in wgs.columns else list(range(1, len(wgs) + 1))
    parts = []
    for crew, geom in zip(crews, wgs.geometry.values, strict=True):  # one per crew: a handful
        if geom is None or shapely.is_empty(geom):
            continue
        coords = np.round(shapely.get_coordinates(geom), LONLAT_DECIMALS)
        name = xml_escape([f"Crew {xml_text(crew)}"])[0]
        points = fill_rows(_RTEPT, coords[:, 1], coords[:, 0])
        parts.append(f" <rte>\n  <name>{name}</name>\n{points} </rte>\n")
    return "".join(parts)


def gpx_bytes(plan: Any, *, routes=None) -> bytes:
    """The GPX 1.1 document for ``plan`` (waypoints, plus one ``rte`` per route line)."""
    from fieldplan import __version__

    caption = plan_caption(plan)
    name = text_escape(xml_text(f"Sampling plan {caption['plan_id']}"))
    desc = text_escape(
        xml_text(f"seed {caption['seed']}; {caption['date']}; {plural(len(plan.points), 'point')}")
    )
    creator = xml_escape([f"fieldplan {__version__}"])[0]
    routes = routes if routes is not None else optional_layer(plan, "routes")
    points = plan.points
    if "status" in points.columns:
        # Points marked inaccessible must not lead anyone there (fieldplan mark).
        points = points[~points["status"].astype(str).str.lower().eq("inaccessible").to_numpy()]
    # GPX 1.1 schema order: metadata, wpt*, rte*, trk*.
    text = (
        '<?xml version="1.0" encoding="UTF-8"?>\n'
        f'<gpx xmlns="{GPX_NS}" xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance" '
        f'xsi:schemaLocation="{GPX_NS} {_GPX_XSD}" version="1.1" creator="{creator}">\n'
        f" <metadata>\n  <name>{name}</name>\n  <desc>{desc}</desc>\n </metadata>\n"
        + waypoints_xml(points)
        + routes_xml(routes)
        + "</gpx>\n"
    )
    return text.encode("utf-8")


def write_gpx(plan: Any, path: Path | str, *, routes=None) -> Path:
    """Write ``points.gpx`` (atomically) and return its path."""
    path = Path(path)
    atomic_write_bytes(path, gpx_bytes(plan, routes=routes))
    return path


def gpx_writer(plan: Any, folder: Path) -> None:
    """Plan-folder writer (``fieldplan.store.WRITERS``): ``points.gpx``."""
    write_gpx(plan, Path(folder) / "points.gpx")
