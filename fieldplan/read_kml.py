"""Read block polygons from KML 2.2 and KMZ (OGC KML) with the standard library.

Each Placemark is one feature: its ``name`` becomes the ``name`` column (a block
id candidate) and its ``ExtendedData`` values become further columns. Points,
lines and tracks are kept as such, so the block reader can skip them with one
note. Coordinates are WGS84 longitude, latitude and optional altitude.

The parser refuses any document type declaration (DTD), entity declaration or
external entity, the hardening ``defusedxml`` applies: KML never needs them, and
they are how XML entity expansion ("billion laughs") and external-entity attacks
work.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET
import zipfile
from pathlib import Path
from xml.parsers import expat

import geopandas as gpd
import shapely

from fieldplan.crs import WGS84
from fieldplan.errors import InputError
from fieldplan.words import plural

__all__ = ["read_kml", "parse_kml", "KML_SUFFIXES"]

KML_SUFFIXES = (".kml", ".kmz")
# A KMZ is a zip: refuse a member that would unpack to more than this (zip bombs).
_MAX_KML_BYTES = 256 * 1024 * 1024


class _Refused(Exception):
    pass


def _refuse(*_args) -> None:
    raise _Refused


def _parse_xml(data: bytes, source: str) -> ET.Element:
    """Parse XML into an element tree with namespaces stripped, refusing DTDs and entities."""
    builder = ET.TreeBuilder()
    parser = expat.ParserCreate(namespace_separator="}")
    parser.SetParamEntityParsing(expat.XML_PARAM_ENTITY_PARSING_NEVER)
    parser.StartDoctypeDeclHandler = _refuse
    parser.EntityDeclHandler = _refuse
    parser.UnparsedEntityDeclHandler = _refuse
    parser.ExternalEntityRefHandler = _refuse
    parser.StartElementHandler = lambda name, attrs: builder.start(name.rpartition("}")[2], attrs)
    parser.EndElementHandler = lambda name: builder.end(name.rpartition("}")[2])
    parser.CharacterDataHandler = builder.data
    try:
        parser.Parse(data, True)
    except _Refused:
        raise InputError(
            f"{source}: the KML holds a document type or entity declaration, which is refused for "
            "safety; export the file again without it"
        ) from None
    except expat.ExpatError as err:
        raise InputError(
            f"{source}: not readable KML (XML error at line {err.lineno}, column {err.offset}: "
            f"{expat.ErrorString(err.code)}); export the file again"
        ) from None
    return builder.close()


def _coords(element: ET.Element | None, source: str, label: str) -> list[tuple[float, ...]]:
    text = (element.text or "") if element is not None else ""
    out = []
    for token in text.split():
        try:
            out.append(tuple(float(v) for v in token.split(",") if v != ""))
        except ValueError:
            raise InputError(
                f"{source}: {label} has a coordinate {token[:40]!r} that is not 'longitude,latitude[,altitude]'; "
                "fix it or export the file again"
            ) from None
    bad = [t for t in out if len(t) not in (2, 3)]
    if bad:
        raise InputError(
            f"{source}: {label} has a coordinate with {len(bad[0])} values; KML needs "
            "'longitude,latitude[,altitude]'"
        )
    return out


def _ring(element: ET.Element | None, source: str, label: str) -> list[tuple[float, ...]]:
    ring = element.find("LinearRing") if element is not None else None
    return _coords(ring.find("coordinates") if ring is not None else None, source, label)


def _geometries(element: ET.Element, source: str, label: str) -> list:
    """Shapely geometries of one KML geometry element (a MultiGeometry gives several)."""
    tag = element.tag
    if tag == "Polygon":
        shell = _ring(element.find("outerBoundaryIs"), source, label)
        holes = [_ring(inner, source, label) for inner in element.findall("innerBoundaryIs")]
        if len(shell) < 4:
            raise InputError(
                f"{source}: {label} has a polygon ring with fewer than 4 points (its last point must repeat "
                "the first); fix the outline or export the file again"
            )
        return [shapely.Polygon(shell, [h for h in holes if len(h) >= 4])]
    if tag == "MultiGeometry":
        parts = []
        for child in element:
            parts.extend(_geometries(child, source, label))
        return parts
    if tag == "Point":
        xy = _coords(element.find("coordinates"), source, label)
        return [shapely.Point(xy[0])] if xy else []
    if tag in ("LineString", "LinearRing"):
        xy = _coords(element.find("coordinates"), source, label)
        return [shapely.LineString(xy)] if len(xy) >= 2 else []
    if tag == "Track":  # gx:Track, a GPS track: "lon lat alt" per gx:coord
        xy = []
        for coord in element.findall("coord"):
            try:
                xy.append(tuple(float(v) for v in (coord.text or "").split()))
            except ValueError:
                continue
        return [shapely.LineString(xy)] if len(xy) >= 2 else []
    if tag == "MultiTrack":
        return [g for child in element.findall("Track") for g in _geometries(child, source, label)]
    return []


_GEOMETRY_TAGS = ("Polygon", "MultiGeometry", "Point", "LineString", "LinearRing", "Track", "MultiTrack")


def _combine(parts: list):
    if not parts:
        return None
    if len(parts) == 1:
        return parts[0]
    kinds = {g.geom_type for g in parts}
    if kinds == {"Polygon"}:
        return shapely.MultiPolygon(parts)
    if kinds == {"LineString"}:
        return shapely.MultiLineString(parts)
    if kinds == {"Point"}:
        return shapely.MultiPoint(parts)
    return shapely.GeometryCollection(parts)


def _placemarks(element: ET.Element, folder: str | None):
    """Placemarks in document order, each with the name of the innermost Folder holding it."""
    for child in element:
        if child.tag == "Placemark":
            yield child, folder
        elif child.tag == "Folder":
            name = child.find("name")
            yield from _placemarks(child, (name.text or "").strip() if name is not None else folder)
        else:
            yield from _placemarks(child, folder)


def parse_kml(data: bytes, *, source: str = "<kml>") -> tuple[gpd.GeoDataFrame, list[str]]:
    """Placemarks of a KML document as a WGS84 GeoDataFrame, and notes for the user.

    Columns: ``name`` (the placemark's name), ``folder`` (the innermost Folder's
    name, when placemarks sit in folders: ``--select folder=...`` picks some),
    ``description`` when any placemark has one, and one column per
    ``ExtendedData`` field. Placemarks without a geometry are left out with a note.
    """
    root = _parse_xml(data, source)
    rows: list[dict] = []
    geoms: list = []
    empty: list[str] = []
    for number, (mark, folder) in enumerate(_placemarks(root, None), start=1):
        name_el = mark.find("name")
        name = (name_el.text or "").strip() if name_el is not None else ""
        label = f"placemark {number}" + (f" ({name!r})" if name else "")
        parts: list = []
        for child in mark:
            if child.tag in _GEOMETRY_TAGS:
                parts.extend(_geometries(child, source, label))
        geom = _combine(parts)
        if geom is None:
            empty.append(label)
            continue
        row: dict = {"name": name or None}
        if folder is not None:
            row["folder"] = folder
        description = mark.find("description")
        if description is not None and (description.text or "").strip():
            row["description"] = description.text.strip()
        extended = mark.find("ExtendedData")
        if extended is not None:
            for data_el in extended.iter("Data"):
                key = data_el.get("name")
                value = data_el.find("value")
                if key and key not in row:
                    row[key] = (value.text or "").strip() if value is not None else None
            for simple in extended.iter("SimpleData"):
                key = simple.get("name")
                if key and key not in row:
                    row[key] = (simple.text or "").strip()
        rows.append(row)
        geoms.append(geom)
    notes = []
    if empty:
        listed = ", ".join(empty[:5]) + (", ..." if len(empty) > 5 else "")
        notes.append(f"{source}: skipped {plural(len(empty), 'placemark')} without a geometry ({listed})")
    columns: dict[str, list] = {"name": []}
    for row in rows:
        for key in row:
            columns.setdefault(key, [])
    data_cols = {key: [row.get(key) for row in rows] for key in columns}
    frame = gpd.GeoDataFrame(data_cols, geometry=gpd.GeoSeries(geoms, crs=WGS84), crs=WGS84)
    return frame, notes


def read_kml(path: str | Path) -> tuple[gpd.GeoDataFrame, list[str]]:
    """Read a ``.kml`` file, or the main KML document of a ``.kmz`` archive."""
    path = Path(path)
    if path.suffix.lower() == ".kmz":
        try:
            with zipfile.ZipFile(path) as archive:
                members = [i for i in archive.infolist() if i.filename.lower().endswith(".kml")]
                if not members:
                    raise InputError(f"{path}: the KMZ holds no .kml document; export the file again")
                # The main document is doc.kml by convention, else the first at the top level.
                members.sort(
                    key=lambda i: (i.filename.lower() != "doc.kml", i.filename.count("/"), i.filename)
                )
                member = members[0]
                if member.file_size > _MAX_KML_BYTES:
                    raise InputError(
                        f"{path}: {member.filename} would unpack to {member.file_size:,} bytes, more than "
                        f"{_MAX_KML_BYTES:,}; export fewer features"
                    )
                data = archive.read(member)
        except zipfile.BadZipFile:
            raise InputError(f"{path}: not a readable KMZ (zip) archive; export the file again") from None
    else:
        data = path.read_bytes()
    return parse_kml(data, source=str(path))
