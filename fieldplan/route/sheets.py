"""Printable crew sheets: one page per crew with a route map, a point table and cautions.

The page is a single self-contained HTML file with no script. Each crew's
section ends with a CSS page break, so printing gives one sheet per crew. The
map is an inline SVG drawn in the plan's metric CRS (north up, equal scale on
both axes): block outlines, the walking route and numbered points. Every piece
of input text goes through :func:`html.escape`.
"""

from __future__ import annotations

import html
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import shapely

__all__ = ["CrewSheet", "HEADINGS", "column_heading", "crew_sheets_html", "svg_route_map"]

_SVG_SIZE = 640.0
_MARGIN = 24.0


@dataclass(frozen=True)
class CrewSheet:
    """What one crew's page shows.

    Attributes
    ----------
    crew : int
        Crew number.
    route_xy : (m, 2) array
        Route vertices in metres (drop-off first when there is one).
    points_xy : (n, 2) array
        The crew's points in visiting order, metres.
    rows : list of dict
        Table rows in visiting order; keys are the table's column names.
    summary : str
        One line: points, km, hours.
    start_xy : (2,) array, optional
        Drop-off point, metres.
    link : str, optional
        The crew page's address (a crew link); printed with a QR code to scan with the phone.
    """

    crew: int
    route_xy: np.ndarray
    points_xy: np.ndarray
    rows: list[dict]
    summary: str
    start_xy: np.ndarray | None = None
    link: str = ""


def _fmt(v: float) -> str:
    return f"{v:.1f}"


def svg_route_map(sheet: CrewSheet, blocks: Sequence = ()) -> str:
    """Inline SVG of one crew's route: block outlines, route line, numbered points.

    Parameters
    ----------
    sheet : CrewSheet
        The crew's route and points.
    blocks : sequence of (name, shapely geometry)
        Block outlines in the same metric CRS; only those near the route are drawn.
    """
    pts = [sheet.points_xy, sheet.route_xy]
    if sheet.start_xy is not None:
        pts.append(np.asarray(sheet.start_xy, float).reshape(1, 2))
    xy = np.vstack([p for p in pts if len(p)]) if any(len(p) for p in pts) else np.zeros((1, 2))
    lo, hi = xy.min(axis=0), xy.max(axis=0)
    span = max(float((hi - lo).max()), 1.0)
    pad = 0.05 * span
    lo, span = lo - pad, span + 2 * pad
    scale = (_SVG_SIZE - 2 * _MARGIN) / span

    def tx(c: np.ndarray) -> np.ndarray:
        c = np.asarray(c, float).reshape(-1, 2)
        return np.column_stack(
            [_MARGIN + (c[:, 0] - lo[0]) * scale, _SVG_SIZE - _MARGIN - (c[:, 1] - lo[1]) * scale]
        )

    box = shapely.box(lo[0], lo[1], lo[0] + span, lo[1] + span)
    parts = [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {_SVG_SIZE:.0f} {_SVG_SIZE:.0f}" '
        f'class="map" role="img" aria-label="Route map of crew {sheet.crew}">',
        f'<rect width="{_SVG_SIZE:.0f}" height="{_SVG_SIZE:.0f}" fill="#fff"/>',
    ]
    for name, geom in blocks:
        if geom is None or not shapely.intersects(geom, box):
            continue
        clipped = shapely.intersection(geom, box)
        for ring in shapely.get_parts(shapely.boundary(clipped)):
            c = tx(shapely.get_coordinates(ring))
            d = " ".join(f"{_fmt(x)},{_fmt(y)}" for x, y in c)
            parts.append(f'<polyline points="{d}" fill="none" stroke="#999" stroke-width="1"/>')
        label = tx(shapely.get_coordinates(shapely.point_on_surface(clipped)))[0]
        parts.append(
            f'<text x="{_fmt(label[0])}" y="{_fmt(label[1])}" class="blk">{html.escape(str(name))}</text>'
        )
    if len(sheet.route_xy) >= 2:
        d = " ".join(f"{_fmt(x)},{_fmt(y)}" for x, y in tx(sheet.route_xy))
        parts.append(f'<polyline points="{d}" fill="none" stroke="#0072B2" stroke-width="2"/>')
    if sheet.start_xy is not None:
        s = tx(sheet.start_xy)[0]
        parts.append(
            f'<rect x="{_fmt(s[0] - 6)}" y="{_fmt(s[1] - 6)}" width="12" height="12" '
            'fill="#D55E00"><title>Drop-off</title></rect>'
        )
    for i, (x, y) in enumerate(tx(sheet.points_xy), start=1):
        parts.append(
            f'<circle cx="{_fmt(x)}" cy="{_fmt(y)}" r="7" fill="#fff" stroke="#000"/>'
            f'<text x="{_fmt(x)}" y="{_fmt(y + 3)}" class="num">{i}</text>'
        )
    bar = 10 ** np.floor(np.log10(max(span / 4, 1.0)))
    bx = _MARGIN
    by = _SVG_SIZE - 8
    parts.append(
        f'<line x1="{_fmt(bx)}" y1="{_fmt(by)}" x2="{_fmt(bx + bar * scale)}" y2="{_fmt(by)}" '
        f'stroke="#000" stroke-width="2"/><text x="{_fmt(bx + bar * scale + 4)}" '
        f'y="{_fmt(by + 3)}" class="blk">{bar:g} m</text>'
        f'<text x="{_fmt(_SVG_SIZE - 12)}" y="20" class="blk">N&#8593;</text>'
    )
    parts.append("</svg>")
    return "".join(parts)


_CSS = """
body { font-family: sans-serif; font-size: 11pt; margin: 1.5em; color: #111; }
section.crew { break-after: page; page-break-after: always; }
section.crew:last-of-type { break-after: auto; page-break-after: auto; }
h1 { font-size: 16pt; margin: 0 0 .3em; }
p.summary { margin: 0 0 .6em; }
svg.map { width: 100%; max-width: 16cm; height: auto; border: 1px solid #ccc; }
svg .num { font-size: 9px; text-anchor: middle; }
svg .blk { font-size: 11px; fill: #555; }
table { border-collapse: collapse; width: 100%; margin-top: .6em; }
th, td { border: 1px solid #999; padding: 2px 4px; text-align: left; vertical-align: top; }
th { background: #eee; }
td.done { width: 2.5em; }
ul.cautions { font-size: 9.5pt; border: 2px solid #D55E00; padding: .4em .4em .4em 1.6em; }
div.link { display: flex; gap: .8em; align-items: center; margin: .4em 0; font-size: 9pt; }
div.link code { word-break: break-all; }
"""


def _link_html(link: str) -> str:
    """The crew page's QR code (inline SVG, no image to fetch) and the address as text."""
    import segno

    qr = segno.make_qr(link, error="m")
    svg = qr.svg_inline(scale=3, border=4, title=None)
    return (
        f'<div class="link">{svg}<div>Scan with the crew phone to open the crew page '
        f"(works offline once opened):<br><code>{html.escape(link)}</code></div></div>"
    )


#: Printed headings of the crew sheet's table: words a crew reads, not the files' column names.
HEADINGS = {
    "point_id": "Point",
    "sample_id": "Bag id",
    "block": "Block",
    "stratum": "Stratum",
    "row": "Row",
    "plant": "Plant",
    "instructions": "What to take",
    "lon": "Longitude",
    "lat": "Latitude",
    "visit_order": "Visit",
}


def column_heading(column: str) -> str:
    """The printed heading of a table column (``sample_id`` -> ``Bag id``)."""
    return HEADINGS.get(column, str(column).replace("_", " ").capitalize())


def crew_sheets_html(
    sheets: Sequence[CrewSheet],
    *,
    title: str,
    columns: Sequence[str],
    cautions: Sequence[str],
    blocks: Sequence = (),
) -> str:
    """The printable page for all crews.

    Parameters
    ----------
    sheets : sequence of CrewSheet
        One per crew.
    title : str
        Heading prefix, e.g. the plan id.
    columns : sequence of str
        Table columns shown (keys of each row dict); a tick-box column is added.
    cautions : sequence of str
        Field cautions printed on every page.
    blocks : sequence of (name, geometry)
        Block outlines for the maps.
    """
    esc = html.escape
    out = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta http-equiv="Content-Security-Policy" content="default-src \'none\'; '
        "style-src 'unsafe-inline'; img-src data:\">",
        f"<title>{esc(title)} crew sheets</title>",
        f"<style>{_CSS}</style></head><body>",
    ]
    caution_html = "".join(f"<li>{esc(str(c))}</li>" for c in cautions)
    head = "".join(f"<th>{esc(column_heading(c))}</th>" for c in columns)
    for sheet in sheets:
        out.append(f'<section class="crew" id="crew-{sheet.crew}">')
        out.append(f"<h1>{esc(title)} &mdash; Crew {sheet.crew}</h1>")
        out.append(f'<p class="summary">{esc(sheet.summary)}</p>')
        if sheet.link:
            out.append(_link_html(sheet.link))
        out.append(f'<ul class="cautions">{caution_html}</ul>')
        out.append(svg_route_map(sheet, blocks))
        out.append(f"<table><thead><tr><th>#</th>{head}<th>Done</th></tr></thead><tbody>")
        for i, row in enumerate(sheet.rows, start=1):
            cells = "".join(f"<td>{esc(_cell(row.get(c)))}</td>" for c in columns)
            out.append(f'<tr><td>{i}</td>{cells}<td class="done">&#9744;</td></tr>')
        out.append("</tbody></table></section>")
    out.append("</body></html>\n")
    return "\n".join(out)


def _cell(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        if not np.isfinite(value):
            return ""
        return f"{value:g}"
    return str(value)
