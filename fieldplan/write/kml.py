"""points.kml: OGC KML 2.2 with blocks, exclusions and sample points.

One Placemark per point (named by point id, block and stratum in ExtendedData),
block and exclusion outlines as Polygons. Styles use the same colour-blind-safe
palette as the map; no icon URLs, so viewers fall back to their own pin. Unused
spares go in a Folder of their own, "Spares (use only when a point is
inaccessible)", with a grey, smaller pin.

The document is built as text from columns and coordinate arrays in one pass
(:func:`fieldplan.write.gpx.fill_rows`), not element by element; input text is
cleaned by :func:`~fieldplan.write.gpx.xml_text` and escaped.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import shapely

from fieldplan.words import plural
from fieldplan.write.gpx import (
    element_lines,
    fill_rows,
    point_description,
    spare_mask,
    text_column,
    text_escape,
    text_escapes,
    xml_escape,
    xml_text,
)
from fieldplan.write.html_map import plan_caption, stratum_styles
from fieldplan.write.safe import atomic_write_bytes
from fieldplan.write.tables import LONLAT_DECIMALS, points_lonlat

__all__ = ["KML_NS", "SPARES_FOLDER", "kml_colour", "kml_bytes", "placemarks_xml", "write_kml", "kml_writer"]

KML_NS = "http://www.opengis.net/kml/2.2"
_DATA_COLUMNS = ("block", "stratum", "design", "row", "plant", "units", "status")
SPARES_FOLDER = "Spares (use only when a point is inaccessible)"
_SPARE_STYLE = "spare"
_COORD = f"%.{LONLAT_DECIMALS}f"
# KML 2.2 schema order in a Placemark: name, description, styleUrl, ExtendedData, geometry.
_POINT_HEAD = "   <Placemark>\n%s%s    <styleUrl>#%s</styleUrl>\n    <ExtendedData>\n"
_POINT_TAIL = (
    f"    </ExtendedData>\n    <Point>\n     <coordinates>{_COORD},{_COORD}</coordinates>\n"
    "    </Point>\n   </Placemark>\n"
)
_AREA = "   <Placemark>\n    <name>%s</name>\n%s    <styleUrl>#%s</styleUrl>\n%s   </Placemark>\n"
# One ring: [Polygon opened] boundary tag, LinearRing, coordinates, [Polygon closed] [end of owner].
_RING = "%s%s<%s>\n%s <LinearRing>\n%s  %s\n%s </LinearRing>\n%s</%s>\n%s%s"
_ICON_STYLE = '  <Style id="%s">\n   <IconStyle>\n    <color>%s</color>\n    <scale>%s</scale>\n   </IconStyle>\n  </Style>\n'
#: Between texts joined into one string; input text cannot hold it (xml_text drops it).
_SEP = "\x00"


def kml_colour(hex_rgb: str, *, alpha: int = 255) -> str:
    """``#RRGGBB`` to KML's ``aabbggrr`` (OGC 07-147r2, kml:colorType)."""
    rgb = hex_rgb.lstrip("#")
    return f"{alpha:02x}{rgb[4:6]}{rgb[2:4]}{rgb[0:2]}".lower()


def _line_style(sid: str, line: str, fill: str | None) -> str:
    poly = "    <fill>0</fill>\n" if fill is None else f"    <color>{kml_colour(fill, alpha=0x80)}</color>\n"
    return (
        f'  <Style id="{sid}">\n   <LineStyle>\n    <color>{kml_colour(line)}</color>\n'
        f"    <width>2</width>\n   </LineStyle>\n   <PolyStyle>\n{poly}   </PolyStyle>\n  </Style>\n"
    )


def _split_joined(text: str, count: int) -> list[str]:
    """``count`` texts that were each followed by :data:`_SEP` in ``text``."""
    if count == 0:
        return []
    parts = text.split(_SEP)
    if len(parts) != count + 1:
        raise ValueError("a text held the column separator")  # xml_text makes this impossible
    return parts[:-1]


def _choose(mask: np.ndarray, yes: str, no: str) -> np.ndarray:
    """``yes`` where ``mask``, else ``no``, as Python str (numpy's own str type drops a trailing NUL)."""
    out = np.full(len(mask), no, dtype=object)
    out[mask] = yes
    return out


def _geometry_texts(geoms: np.ndarray) -> np.ndarray:
    """The geometry part of each area Placemark (Polygon, or MultiGeometry of Polygons).

    Built over all features at once: parts, rings and coordinates come from shapely as
    flat arrays with the index of their owner, and each level's texts are cut apart at
    the owner changes. Parts that are not polygons, or empty, are left out (a placemark of
    several parts keeps its MultiGeometry).
    """
    n = len(geoms)
    parts, part_owner = shapely.get_parts(geoms, return_index=True)
    multi = np.bincount(part_owner, minlength=n) > 1
    polygon = (shapely.get_type_id(parts) == 3) & ~shapely.is_empty(parts)
    polygons, owner = parts[polygon], part_owner[polygon]
    rings, ring_polygon = shapely.get_rings(polygons, return_index=True)
    ring_owner = owner[ring_polygon]
    coords, coord_ring = shapely.get_coordinates(rings, return_index=True)
    coords = np.round(coords, LONLAT_DECIMALS)
    # Coordinates: "lon,lat" joined by spaces within a ring, each ring ended by _SEP.
    last_coord = np.r_[coord_ring[1:] != coord_ring[:-1], True] if len(coord_ring) else np.zeros(0, bool)
    seps = _choose(last_coord, _SEP, " ")
    filled = np.bincount(coord_ring, minlength=len(rings)) > 0
    ring_text = np.full(len(rings), "", dtype=object)
    ring_text[filled] = _split_joined(
        fill_rows(f"{_COORD},{_COORD}%s", coords[:, 0], coords[:, 1], seps), int(filled.sum())
    )
    coordinates = np.where(filled, "<coordinates>" + ring_text + "</coordinates>", "<coordinates />")
    # Rings: exterior first (shapely.get_rings order), indented one more inside a MultiGeometry.
    deep = multi[ring_owner]
    outer = np.r_[True, ring_polygon[1:] != ring_polygon[:-1]] if len(rings) else np.zeros(0, bool)
    last_ring = np.r_[ring_polygon[1:] != ring_polygon[:-1], True] if len(rings) else np.zeros(0, bool)
    last_of_owner = np.r_[ring_owner[1:] != ring_owner[:-1], True] if len(rings) else np.zeros(0, bool)
    pad = np.where(deep, "     ", "    ")
    inner_pad = np.where(deep, "      ", "     ")
    tag = np.where(outer, "outerBoundaryIs", "innerBoundaryIs")
    opening = np.where(outer, pad + "<Polygon>\n", "")
    closing = np.where(last_ring, pad + "</Polygon>\n", "")
    body = np.full(n, "", dtype=object)
    has_rings = np.zeros(n, dtype=bool)
    has_rings[ring_owner] = True
    body[has_rings] = _split_joined(
        fill_rows(
            _RING,
            opening,
            inner_pad,
            tag,
            inner_pad,
            inner_pad,
            coordinates,
            inner_pad,
            inner_pad,
            tag,
            closing,
            _choose(last_of_owner, _SEP, ""),
        ),
        int(has_rings.sum()),
    )
    wrapped = np.where(
        has_rings, "    <MultiGeometry>\n" + body + "    </MultiGeometry>\n", "    <MultiGeometry />\n"
    )
    return np.where(multi, wrapped, body).astype(object)


def _area_placemarks(names, descriptions, style: str, geoms) -> str:
    """Placemarks of areas (blocks, exclusions): escaped name, description, outline.

    A missing or empty geometry gives no placemark.
    """
    geoms = np.asarray(geoms, dtype=object)
    keep = ~shapely.is_missing(geoms)
    keep[keep] = ~shapely.is_empty(geoms[keep])
    if not keep.any():
        return ""
    names = np.asarray(names, dtype=object)[keep]
    descriptions = np.asarray(descriptions, dtype=object)[keep]
    # Element text as ElementTree writes it: & < > escaped, quotes kept.
    descriptions = np.where(
        descriptions != "", "    <description>" + text_escapes(descriptions) + "</description>\n", ""
    )
    return fill_rows(
        _AREA,
        text_escapes(names),
        descriptions,
        np.full(len(names), style, dtype=object),
        _geometry_texts(geoms[keep]),
    )


def kml_bytes(plan: Any) -> bytes:
    """The KML 2.2 document for ``plan``."""
    from fieldplan.safety import cautions_text, plan_cautions

    caption = plan_caption(plan)
    points = plan.points
    name = text_escape(xml_text(f"Sampling plan {caption['plan_id']}"))
    description = text_escape(
        xml_text(
            f"Seed {caption['seed']}; {caption['date']}; {plural(len(points), 'point')}.\n"
            + cautions_text(plan_cautions(plan))
        )
    )
    styles = stratum_styles(points["stratum"].astype(str)) if len(points) else {}
    style_ids = {stratum: f"stratum-{i}" for i, stratum in enumerate(styles)}
    text = [
        '<?xml version="1.0" encoding="UTF-8"?>\n',
        f'<kml xmlns="{KML_NS}">\n <Document>\n',
        f"  <name>{name}</name>\n  <description>{description}</description>\n",
        _line_style("block", "#333333", None),
        _line_style("exclusion", "#555555", "#999999"),
        fill_rows(
            _ICON_STYLE,
            list(style_ids.values()),
            [kml_colour(styles[s]["colour"]) for s in style_ids],
            ["0.8"] * len(style_ids),
        ),
        # Grey and smaller than any stratum pin, and in a folder of their own: a spare is not a plan point.
        _ICON_STYLE % (_SPARE_STYLE, kml_colour("#8c8c8c"), "0.6"),
        "  <Folder>\n   <name>Blocks</name>\n",
    ]
    if len(plan.blocks):
        blocks = plan.blocks.to_crs(4326)
        names = text_column(blocks["block"])
        varieties = (
            text_column(blocks["variety"]) if "variety" in blocks else np.full(len(blocks), "", object)
        )
        text.append(
            _area_placemarks(
                "Block " + names,
                np.where(varieties != "", "Variety " + varieties, ""),
                "block",
                blocks.geometry.values,
            )
        )
    text.append("  </Folder>\n")
    exclusions = getattr(plan, "exclusions", None)
    if exclusions is not None and len(exclusions):
        wgs = exclusions.to_crs(4326)
        names = text_column(wgs["name"]) if "name" in wgs else np.full(len(wgs), "", object)
        text += [
            "  <Folder>\n   <name>Exclusions (not sampled)</name>\n",
            _area_placemarks(
                "Excluded: " + names, np.full(len(wgs), "", object), "exclusion", wgs.geometry.values
            ),
            "  </Folder>\n",
        ]
    spare = spare_mask(points)
    text += [
        "  <Folder>\n   <name>Sample points</name>\n",
        placemarks_xml(points[~spare], style_ids),
        "  </Folder>\n",
    ]
    if spare.any():
        text += [
            f"  <Folder>\n   <name>{text_escape(SPARES_FOLDER)}</name>\n",
            placemarks_xml(points[spare], {}, style=_SPARE_STYLE),
            "  </Folder>\n",
        ]
    text.append(" </Document>\n</kml>\n")
    return "".join(text).encode("utf-8")


def placemarks_xml(points, style_ids: dict[str, str], *, style: str | None = None) -> str:
    """One point Placemark per row of ``points`` as indented KML text (built column-wise).

    Each point is styled by its stratum through ``style_ids``, or all by ``style`` when given.
    """
    n = len(points)
    if n == 0:
        return ""
    lonlat = points_lonlat(points)
    if style is not None:
        styles = np.full(n, style, dtype=object)
    else:
        codes, strata = pd.factorize(points["stratum"].astype(str), use_na_sentinel=False)
        styles = np.asarray([style_ids[s] for s in strata], dtype=object)[codes]  # one per stratum
    columns = [c for c in _DATA_COLUMNS if c in points.columns]
    data = []
    for column in columns:  # a handful of columns, each over all points
        texts = text_column(points[column])
        line = f'     <Data name="{column}">\n      <value>' + xml_escape(texts) + "</value>\n     </Data>\n"
        data.append(np.where(texts != "", line, "").astype(object))
    return fill_rows(
        _POINT_HEAD + "%s" * len(columns) + _POINT_TAIL,
        element_lines("name", text_column(points["point_id"]), "    "),
        element_lines("description", point_description(points), "    "),
        styles,
        *data,
        lonlat[:, 0],
        lonlat[:, 1],
    )


def write_kml(plan: Any, path: Path | str) -> Path:
    """Write ``points.kml`` (atomically) and return its path."""
    path = Path(path)
    atomic_write_bytes(path, kml_bytes(plan))
    return path


def kml_writer(plan: Any, folder: Path) -> None:
    """Plan-folder writer (``fieldplan.store.WRITERS``): ``points.kml``."""
    write_kml(plan, Path(folder) / "points.kml")
