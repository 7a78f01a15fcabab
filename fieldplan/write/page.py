"""Layout of the printable page (plan.png, plan.pdf): where everything goes, in page pixels.

:func:`page_layout` turns a plan into a :class:`PageLayout`: an A4 landscape page at
150 dpi (origin top left, y down) holding the map frame and its transform from the
plan's projected CRS, the block and exclusion rings as coordinate arrays, the points
with a style code each, block labels, the legend in natural stratum order (no colour
twice), a north arrow turned to true north and kept clear of points and labels, a
scale bar of a 1-2-5 length, and the title, subtitle and wrapped cautions. It draws
nothing: ``fieldplan.write.png`` renders the same layout with Pillow (plan.png) or
matplotlib (plan.pdf), so the two pages cannot drift apart.

Text is measured with DejaVu Sans, the TrueType font matplotlib ships, found without
importing matplotlib; Pillow's own default font stands in when it is missing. Input
text (block, variety and stratum names) passes :func:`page_text`, which replaces
what the font cannot draw, so no name can break the page.
"""

from __future__ import annotations

import math
import unicodedata
from collections.abc import Callable
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path
from typing import Any

import numpy as np
import shapely

from fieldplan.words import plural
from fieldplan.write.html_map import INACCESSIBLE_STYLE, PALETTE, plan_caption, stratum_styles

__all__ = [
    "A4_LANDSCAPE_IN",
    "DPI",
    "PAGE_SIZE",
    "MAX_LEGEND_STRATA",
    "MAX_LABELLED_BLOCKS",
    "COLOURS",
    "Text",
    "Rings",
    "LegendEntry",
    "PageLayout",
    "font",
    "font_path",
    "page_text",
    "legend_colours",
    "page_styles",
    "nice_length",
    "true_north_bearing",
    "marker_diameter",
    "page_layout",
]

A4_LANDSCAPE_IN = (297 / 25.4, 210 / 25.4)  # ISO 216 A4, 297 mm x 210 mm
DPI = 150
#: Page size in pixels at :data:`DPI` (whole pixels, as a 150 dpi raster of A4 has).
PAGE_SIZE = (int(A4_LANDSCAPE_IN[0] * DPI), int(A4_LANDSCAPE_IN[1] * DPI))
PX_PER_PT = DPI / 72.0
MAX_LEGEND_STRATA = 24
#: Above this many blocks the page carries no block labels: at A4 they overlap
#: into an unreadable mass, and drawing them dominated the time to write a plan.
MAX_LABELLED_BLOCKS = 200
#: Longest name drawn on the page, in characters (longer ones end in an ellipsis).
MAX_NAME_CHARS = 48
MARGIN = 0.03  # page margin, share of the page width
LABEL_PT, LEGEND_PT, CAUTION_PT = 7.0, 7.0, 6.5

#: Page colours other than the strata's.
COLOURS = {
    "paper": "#ffffff",
    "block": "#fbfbf7",
    "block_edge": "#333333",
    "exclusion": "#d9d9d9",
    "exclusion_edge": "#555555",
    "marker_edge": "#1a1a1a",
    "spare": "#ffffff",
    "frame": "#888888",
    "ink": "#111111",
    "label": "#222222",
    "caution": "#333333",
    "legend_edge": "#cccccc",
}
#: Points whose ``status`` is one of these are drawn in its style, whatever their stratum, in
#: shapes no stratum uses: spares (white X: "not yet to be sampled") and points marked
#: inaccessible (the map's grey circle struck through). They draw after the strata, in this order.
STATUS_STYLES: dict[str, dict[str, str]] = {
    "spare": {"colour": "#ffffff", "shape": "cross", "legend": "Spare point, used only to replace one"},
    "inaccessible": {
        "colour": INACCESSIBLE_STYLE["colour"],
        "shape": "circle-x",
        "legend": INACCESSIBLE_STYLE["legend"],
    },
}

# Paul Tol (2021), "Colour Schemes", SRON/EPS/TN/09-002, the muted qualitative scheme
# (from memory): more distinct colours after Okabe & Ito's seven, so a page legend of up
# to 16 strata never shows one colour twice.
TOL_MUTED: tuple[str, ...] = (
    "#CC6677",
    "#332288",
    "#DDCC77",
    "#117733",
    "#88CCEE",
    "#882255",
    "#44AA99",
    "#999933",
    "#AA4499",
)

# Where the north arrow may go on the map, tried in this order: top right, top left,
# bottom right, bottom left. The scale bar then takes the first corner left clear.
_ARROW_CORNERS = ("tr", "tl", "br", "bl")
_BAR_CORNERS = ("bl", "br", "tl", "tr")
_ARROW_LENGTH = 62.0  # px, tail to tip
_CORNER_INSET = 14.0  # px between a corner item and the frame
_CLEARANCE = 10.0  # px kept free between a marker and the arrow or the scale bar


# ---------------------------------------------------------------------------- fonts and text


def font_path(bold: bool = False) -> Path | None:
    """DejaVu Sans (or Bold) as shipped in matplotlib's package data, found without importing it."""
    import importlib.util

    try:
        spec = importlib.util.find_spec("matplotlib")
    except (ImportError, ValueError):
        return None
    for root in (spec.submodule_search_locations or []) if spec else []:
        path = (
            Path(root) / "mpl-data" / "fonts" / "ttf" / ("DejaVuSans-Bold.ttf" if bold else "DejaVuSans.ttf")
        )
        if path.is_file():
            return path
    return None


@lru_cache(maxsize=64)
def font(size_pt: float, bold: bool = False) -> Any:
    """A Pillow font of ``size_pt`` points at :data:`DPI`: DejaVu Sans, else Pillow's default."""
    from PIL import ImageFont

    size_px = size_pt * PX_PER_PT
    path = font_path(bold)
    if path is not None:
        try:
            return ImageFont.truetype(str(path), size_px)
        except OSError:
            pass
    return ImageFont.load_default(size=size_px)


@lru_cache(maxsize=4096)
def _drawable(char: str, bold: bool) -> bool:
    """Whether the page font has a glyph for ``char`` (not its empty-box stand-in)."""
    from PIL import ImageFont

    face = font(7.0, bold)
    if not isinstance(face, ImageFont.FreeTypeFont):  # Pillow's bitmap font: Latin-1 only
        return ord(char) < 256 and char.isprintable()
    missing = _missing_glyph(bold)
    try:
        return bytes(face.getmask(char)) != missing
    except (ValueError, OSError, UnicodeError):
        return False


@lru_cache(maxsize=2)
def _missing_glyph(bold: bool) -> bytes:
    # U+10FFFD is a private-use code point no text font maps: its mask is the empty box.
    return bytes(font(7.0, bold).getmask("\U0010fffd"))


def page_text(value: Any, *, bold: bool = False, limit: int = MAX_NAME_CHARS) -> str:
    """Input text made safe to draw: one line, at most ``limit`` characters, every glyph drawable.

    Line breaks and tabs become spaces; control, surrogate, unassigned and private-use
    characters, and characters the font has no glyph for, become "?"; invisible format
    characters (joiners, direction marks) the font lacks are dropped. Nothing is escaped:
    neither renderer interprets markup ('$' is a dollar sign, not TeX).
    """
    text = "" if value is None else str(value)
    text = " ".join(text.replace("\x00", " ").split())
    if len(text) > limit:
        text = text[: max(limit - 1, 1)].rstrip() + "\u2026"
    out = []
    for char in text:
        category = unicodedata.category(char)
        if category in ("Cc", "Cs", "Cn", "Co"):
            out.append("?")
        elif _drawable(char, bold):
            out.append(char)
        elif category != "Cf":
            out.append("?")
    return "".join(out)


def text_width(text: str, size_pt: float, bold: bool = False) -> float:
    return float(font(size_pt, bold).getlength(text))


def _fit_width(text: str, size_pt: float, bold: bool, width: float) -> str:
    """``text`` shortened with an ellipsis until it is at most ``width`` pixels wide."""
    if text_width(text, size_pt, bold) <= width:
        return text
    while len(text) > 1 and text_width(text + "\u2026", size_pt, bold) > width:
        text = text[:-1]
    return text.rstrip() + "\u2026"


def _wrap(text: str, size_pt: float, width: float) -> list[str]:
    """Greedy word wrap to ``width`` pixels (a word longer than a line is cut)."""
    face = font(size_pt)
    lines: list[str] = []
    line = ""
    for word in text.split():
        while face.getlength(word) > width and len(word) > 1:  # cut an over-long word
            cut = len(word) - 1
            while cut > 1 and face.getlength(word[:cut]) > width:
                cut -= 1
            if line:
                lines.append(line)
                line = ""
            lines.append(word[:cut])
            word = word[cut:]
        trial = f"{line} {word}" if line else word
        if line and face.getlength(trial) > width:
            lines.append(line)
            line = word
        else:
            line = trial
    if line:
        lines.append(line)
    return lines


# ---------------------------------------------------------------------------- colours and symbols


def _hsv_to_hex(h: float, s: float, v: float) -> str:
    import colorsys

    r, g, b = colorsys.hsv_to_rgb(h, s, v)
    return "#" + "".join(format(round(c * 255), "02x") for c in (r, g, b))


def legend_colours(n: int) -> list[str]:
    """``n`` different colours: Okabe & Ito's, then Tol's muted, then evenly spaced hues."""
    colours = [*PALETTE, *TOL_MUTED][:n]
    extra = n - len(colours)
    if extra > 0:
        # Hues spread evenly, alternating two lightness levels so neighbours differ twice.
        taken = {c.lower() for c in colours}
        for i in range(extra):
            hue = (i / extra + 0.03) % 1.0
            value = 0.85 if i % 2 == 0 else 0.55
            colour = _hsv_to_hex(hue, 0.75, value)
            while colour.lower() in taken:  # never the same colour twice, however close
                value *= 0.98
                colour = _hsv_to_hex(hue, 0.75, value)
            taken.add(colour.lower())
            colours.append(colour)
    return colours


def page_styles(strata: Any) -> dict[str, dict[str, str]]:
    """Stratum styles for the printed page: the map's shapes, and no colour used twice.

    The map repeats its seven colour-blind-safe colours with a different shape; on a
    printed legend a repeated colour reads as "the same stratum", so the page gives
    each of the strata it lists a colour of its own.
    """
    styles = stratum_styles(strata)
    if len(styles) <= len(PALETTE):
        return styles
    shown = min(len(styles), MAX_LEGEND_STRATA)
    colours = legend_colours(shown)
    out = {}
    for i, (name, style) in enumerate(styles.items()):
        out[name] = {**style, "colour": colours[i]} if i < shown else dict(style)
    return out


def marker_diameter(n_points: int) -> float:
    """Marker size in pixels: smaller as plans grow, so points stay apart on A4."""
    # 5.3, 3.7 and 2 pt: the sizes the page has always used (matplotlib areas 28, 14 and 4 pt^2).
    area_pt2 = 28 if n_points < 500 else (14 if n_points < 5000 else 4)
    return math.sqrt(area_pt2) * PX_PER_PT


# ---------------------------------------------------------------------------- map geometry


def nice_length(span_m: float) -> float:
    """Largest 1-2-5 x 10^k length not above ``span_m`` (at least 1 m)."""
    if not span_m > 1:
        return 1.0
    power = 10 ** math.floor(math.log10(span_m))
    for step in (5, 2, 1):
        if step * power <= span_m:
            return float(step * power)
    return float(power)


def true_north_bearing(crs: Any, x: float, y: float) -> float:
    """Direction of true north at ``(x, y)``, in degrees clockwise from the map's grid north.

    Found by stepping 0.001 degree north in latitude and projecting back, so it
    equals minus the meridian convergence of the projection at that spot.
    """
    from pyproj import Transformer

    to_geo = Transformer.from_crs(crs, 4326, always_xy=True)
    to_map = Transformer.from_crs(4326, crs, always_xy=True)
    lon, lat = to_geo.transform(x, y)
    step = -0.001 if lat > 89.0 else 0.001
    x2, y2 = to_map.transform(lon, lat + step)
    dx, dy = (x2 - x) * np.sign(step), (y2 - y) * np.sign(step)
    return math.degrees(math.atan2(dx, dy))


@dataclass(frozen=True)
class Rings:
    """Polygon rings as one coordinate array: ring ``i`` is ``xy[start[i]:start[i + 1]]``.

    ``hole[i]`` says whether ring ``i`` is an interior ring; the rings of one polygon
    follow each other, exterior first.
    """

    xy: np.ndarray
    start: np.ndarray
    hole: np.ndarray

    def __len__(self) -> int:
        return len(self.hole)

    def ring(self, i: int) -> np.ndarray:
        return self.xy[self.start[i] : self.start[i + 1]]


def _rings(geoms: Any, to_page: Callable[[np.ndarray], np.ndarray]) -> Rings:
    """Rings of the polygons in ``geoms`` in page pixels, from shapely's coordinate arrays."""
    geoms = np.asarray([g for g in geoms if g is not None], dtype=object)
    parts = shapely.get_parts(geoms) if len(geoms) else np.empty(0, dtype=object)
    polys = parts[(shapely.get_type_id(parts) == 3) & ~shapely.is_empty(parts)] if len(parts) else parts
    if not len(polys):
        return Rings(np.empty((0, 2)), np.zeros(1, dtype=np.int64), np.zeros(0, dtype=bool))
    rings, ring_poly = shapely.get_rings(polys, return_index=True)
    xy, vert_ring = shapely.get_coordinates(rings, return_index=True)
    counts = np.bincount(vert_ring, minlength=len(rings))
    start = np.r_[0, np.cumsum(counts)].astype(np.int64)
    hole = np.r_[False, ring_poly[1:] == ring_poly[:-1]]
    return Rings(to_page(xy), start, hole)


# ---------------------------------------------------------------------------- the layout


@dataclass(frozen=True)
class Text:
    """One line of text. ``anchor`` is Pillow's two letters: horizontal l/m/r, vertical a/m/s/d
    (ascender, middle, baseline, descender); ``halo`` draws a white outline behind it."""

    x: float
    y: float
    text: str
    size: float  # points
    bold: bool = False
    colour: str = "#111111"
    anchor: str = "ls"
    halo: bool = False
    role: str = ""

    def box(self) -> tuple[float, float, float, float]:
        """Its extent on the page ``(x0, y0, x1, y1)``, as the font draws it."""
        x0, y0, x1, y1 = font(self.size, self.bold).getbbox(self.text, anchor=self.anchor)
        grow = 3.0 if self.halo else 0.0
        return (self.x + x0 - grow, self.y + y0 - grow, self.x + x1 + grow, self.y + y1 + grow)


@dataclass(frozen=True)
class LegendEntry:
    """A legend row: a swatch (``kind`` marker, block, exclusion or none) and its label."""

    kind: str
    label: Text
    swatch: tuple[float, float]  # centre of the swatch
    colour: str = ""
    shape: str = ""
    stratum: str | None = None
    count: int = 0


@dataclass
class PageLayout:
    """Everything on the page, in pixels at :data:`DPI` (origin top left, y down)."""

    size: tuple[int, int]
    dpi: int
    frame: tuple[float, float, float, float]  # map frame x0, y0, x1, y1
    extent: tuple[float, float, float, float]  # world x0, y0, x1, y1 (metres, plan CRS)
    scale: float  # page pixels per metre
    crs: Any
    blocks: Rings
    exclusions: Rings
    points: np.ndarray  # (n, 2) page xy, in drawing order
    point_style: np.ndarray  # (n,) index into ``styles``
    styles: list[dict[str, str]]  # {"name", "colour", "shape"}: the strata's, then STATUS_STYLES'
    n_strata: int
    marker: float  # marker diameter, px
    labels: list[Text]
    legend_box: tuple[float, float, float, float]
    legend_title: Text
    legend: list[LegendEntry]
    legend_marker: float
    north: float  # true north, degrees clockwise from page up
    arrow: dict  # tail, tip, head (3, 2) polygon, width, label Text, box, on_map
    scale_bar: dict  # length_m, x0, x1, y, height, box, label Text, on_map
    texts: list[Text] = field(default_factory=list)  # title, subtitle, notes, cautions

    def to_page(self, xy: np.ndarray) -> np.ndarray:
        """World coordinates (plan CRS, metres) to page pixels."""
        return _transform(self.frame, self.extent, self.scale)(np.asarray(xy, dtype=float))


def _transform(frame: tuple, extent: tuple, scale: float) -> Callable[[np.ndarray], np.ndarray]:
    fx0, _, _, fy1 = frame
    wx0, wy0, _, _ = extent

    def to_page(xy: np.ndarray) -> np.ndarray:
        xy = np.asarray(xy, dtype=float).reshape(-1, 2)
        return np.column_stack([fx0 + (xy[:, 0] - wx0) * scale, fy1 - (xy[:, 1] - wy0) * scale])

    return to_page


def _boxes_hit(box: tuple, xy: np.ndarray, radius: float, rects: list) -> bool:
    """Whether ``box`` (padded by :data:`_CLEARANCE`) touches a marker or one of ``rects``."""
    x0, y0, x1, y1 = box
    pad = _CLEARANCE + radius
    if (
        len(xy)
        and (
            (xy[:, 0] >= x0 - pad) & (xy[:, 0] <= x1 + pad) & (xy[:, 1] >= y0 - pad) & (xy[:, 1] <= y1 + pad)
        ).any()
    ):
        return True
    return any(_overlap((x0, y0, x1, y1), r) for r in rects)


def _arrow_at(cx: float, cy: float, north: float, on_map: bool) -> dict:
    """North arrow centred on ``(cx, cy)``: shaft, head polygon, "N" beyond the tip, and its box."""
    ux, uy = math.sin(math.radians(north)), -math.cos(math.radians(north))  # page y points down
    half = _ARROW_LENGTH / 2
    tail = (cx - ux * half, cy - uy * half)
    tip = (cx + ux * half, cy + uy * half)
    head_len, head_half = 18.0, 7.5
    base = (tip[0] - ux * head_len, tip[1] - uy * head_len)
    head = np.array(
        [
            tip,
            (base[0] - uy * head_half, base[1] + ux * head_half),
            (base[0] + uy * head_half, base[1] - ux * head_half),
        ]
    )
    label = Text(
        cx + ux * (half + 14), cy + uy * (half + 14), "N", 11, bold=True, anchor="mm", halo=True, role="north"
    )
    pts = np.vstack([tail, tip, head])
    lx0, ly0, lx1, ly1 = label.box()
    box = (
        min(pts[:, 0].min() - 3, lx0),
        min(pts[:, 1].min() - 3, ly0),
        max(pts[:, 0].max() + 3, lx1),
        max(pts[:, 1].max() + 3, ly1),
    )
    return {
        "tail": tail,
        "tip": tip,
        "head": head,
        "width": 4.0,
        "label": label,
        "box": box,
        "on_map": on_map,
    }


def _scale_bar_at(
    corner: str, frame: tuple, length_m: float, scale: float, on_map: bool, origin: tuple | None = None
) -> dict:
    """Scale bar in a frame corner (or with its box's top left at ``origin``)."""
    bar_px = length_m * scale
    label_text = f"{length_m / 1000:g} km" if length_m >= 1000 else f"{length_m:g} m"
    face = font(8.0)
    x0, y0, x1, y1 = face.getbbox(label_text, anchor="ma")
    text_h = y1 - y0
    pad, bar_h, gap = 8.0, 5.0, 5.0
    w = max(bar_px, x1 - x0) + 2 * pad
    h = pad + bar_h + gap + text_h + pad
    fx0, fy0, fx1, fy1 = frame
    if origin is not None:
        bx, by = origin
    else:
        bx = fx0 + _CORNER_INSET if corner[1] == "l" else fx1 - _CORNER_INSET - w
        by = fy0 + _CORNER_INSET if corner[0] == "t" else fy1 - _CORNER_INSET - h
    box = (bx, by, bx + w, by + h)
    left = bx + (w - bar_px) / 2
    label = Text(bx + w / 2, by + pad + bar_h + gap - y0, label_text, 8.0, anchor="ma", role="scale")
    return {
        "length_m": length_m,
        "x0": left,
        "x1": left + bar_px,
        "y": by + pad,
        "height": bar_h,
        "box": box,
        "label": label,
        "on_map": on_map,
        "corner": corner if on_map else "",
    }


def _head_and_cautions(plan: Any, title: str | None, n_planned: int, n_spare: int, n_gone: int) -> list[Text]:
    """Title and subtitle at the top, the cautions wrapped at the foot (as many lines as they need)."""
    from fieldplan.safety import plan_cautions

    width, height = PAGE_SIZE
    margin = MARGIN * width
    caption = plan_caption(plan)
    head = page_text(title or f"Sampling plan {caption['plan_id']}", bold=True, limit=120)
    texts = [Text(margin, 0.045 * height, head, 13, bold=True, role="title")]
    crs_name = page_text(getattr(plan.crs, "name", plan.crs), limit=60)
    n_blocks = len(plan.blocks)
    sub = (
        f"Seed {page_text(caption['seed'])}   Date {page_text(caption['date']) or '-'}"
        f"   Design {page_text(caption['design']) or '-'}"
        f"   {plural(n_planned, 'point')} in {plural(n_blocks, 'block')}   CRS {crs_name}"
    )
    if n_spare:
        sub += f"   {plural(n_spare, 'spare')}"
    if n_gone:
        sub += f"   {n_gone} marked inaccessible"
    if n_blocks > MAX_LABELLED_BLOCKS:
        sub += f"   Block labels left out (over {MAX_LABELLED_BLOCKS} blocks): see map.html or points.csv"
    sub = _fit_width(sub, 8, False, width - 2 * margin)
    texts.append(Text(margin, 0.075 * height, sub, 8, role="subtitle"))
    cautions = "Cautions: " + " ".join(str(c) for c in plan_cautions(plan))
    # a little slack: matplotlib (the PDF) sets text a few per cent wider than FreeType here
    lines = _wrap(page_text(cautions, limit=10_000), CAUTION_PT, 0.96 * (width - 2 * margin))
    line_h = 1.25 * CAUTION_PT * PX_PER_PT
    top = height - 0.03 * height - len(lines) * line_h
    for i, line in enumerate(lines):
        y = top + i * line_h
        texts.append(
            Text(margin, y, line, CAUTION_PT, colour=COLOURS["caution"], anchor="la", role="caution")
        )
    return texts


def _map_frame(plan: Any, bottom: float) -> tuple[tuple, tuple, float, tuple]:
    """Map box, frame, scale and world extent.

    The box lies left of the legend, between the subtitle and ``bottom``; the frame keeps
    the plan's aspect (one scale both ways) and sits centred in the box.
    """
    width, height = PAGE_SIZE
    box = (MARGIN * width, 0.10 * height, 0.73 * width, bottom)
    source = plan.blocks if len(plan.blocks) else plan.points
    if len(source):
        minx, miny, maxx, maxy = (float(v) for v in source.total_bounds)
    else:
        minx, miny, maxx, maxy = 0.0, 0.0, 100.0, 100.0
    pad = 0.05 * max(maxx - minx, maxy - miny, 10.0)
    extent = (minx - pad, miny - pad, maxx + pad, maxy + pad)
    span_x, span_y = extent[2] - extent[0], extent[3] - extent[1]
    scale = min((box[2] - box[0]) / span_x, (box[3] - box[1]) / span_y)
    fw, fh = span_x * scale, span_y * scale
    fx0 = box[0] + ((box[2] - box[0]) - fw) / 2
    fy0 = box[1] + ((box[3] - box[1]) - fh) / 2
    return box, (fx0, fy0, fx0 + fw, fy0 + fh), scale, extent


def _status_code(points: Any) -> np.ndarray:
    """Per point: 0 for a point drawn by its stratum, else 1 + the index of its status in
    :data:`STATUS_STYLES`."""
    code = np.zeros(len(points), dtype=np.int64)
    if len(points) and "status" in points.columns:
        status = points["status"].astype(str).str.lower().to_numpy()
        for i, kind in enumerate(STATUS_STYLES):
            code[status == kind] = i + 1
    return code


def _point_layer(points: Any, status: np.ndarray) -> tuple[np.ndarray, np.ndarray, list[dict[str, str]]]:
    """World xy in drawing order, a style code per point, and the styles: the strata's, then
    one per :data:`STATUS_STYLES` entry.

    Points go by stratum in the legend's order (later strata draw on top), then by status.
    """
    plain = status == 0
    strata = points["stratum"].astype(str).to_numpy() if len(points) else np.array([], dtype=str)
    by_name = page_styles(strata[plain]) if plain.any() else {}
    styles = [{"name": name, **style} for name, style in by_name.items()]
    n_strata = len(styles)
    code = np.zeros(len(points), dtype=np.int64)
    if n_strata:
        uniq, inverse = np.unique(strata, return_inverse=True)
        position = {name: i for i, name in enumerate(by_name)}
        lookup = np.array([position.get(u, 0) for u in uniq.tolist()], dtype=np.int64)
        code = lookup[inverse.ravel()]
    code = np.where(plain, code, n_strata + status - 1)
    styles += [
        {"name": kind, "colour": style["colour"], "shape": style["shape"]}
        for kind, style in STATUS_STYLES.items()
    ]
    order = np.argsort(code, kind="stable")
    world = shapely.get_coordinates(points.geometry.values) if len(points) else np.empty((0, 2))
    return world[order], code[order], styles


def _block_labels(blocks: Any, to_page: Callable[[np.ndarray], np.ndarray]) -> list[Text]:
    """Block id and variety, centred on a point inside each block (none on crowded pages)."""
    if not 0 < len(blocks) <= MAX_LABELLED_BLOCKS:
        return []
    anchors = to_page(shapely.get_coordinates(shapely.point_on_surface(blocks.geometry.values)))
    varieties = blocks["variety"].tolist() if "variety" in blocks else [None] * len(blocks)
    step = LABEL_PT * PX_PER_PT * 1.15
    style = {"size": LABEL_PT, "bold": True, "colour": COLOURS["label"], "anchor": "mm", "halo": True}
    labels: list[Text] = []
    taken: list[tuple[float, float, float, float]] = []
    for (x, y), name, variety in zip(anchors.tolist(), blocks["block"].tolist(), varieties, strict=True):
        name = page_text(name, bold=True, limit=24)
        variety = page_text(variety, bold=True, limit=24) if isinstance(variety, str) else ""
        lines = [Text(x, y, name, role="block", **style)]
        if variety:
            two = [Text(x, y - step / 2, name, role="block", **style)]
            two.append(Text(x, y + step / 2, variety, role="variety", **style))
            # A variety that would run into a label already placed is left out (it is in
            # points.csv and map.html); the block id always stays.
            boxes = [t.box() for t in two]
            if not any(_overlap(a, b) for a in boxes for b in taken):
                lines = two
        labels += lines
        taken += [t.box() for t in lines]
    return labels


def _overlap(a: tuple, b: tuple) -> bool:
    return not (a[2] <= b[0] or a[0] >= b[2] or a[3] <= b[1] or a[1] >= b[3])


def _legend(
    styles: list[dict[str, str]], counts: np.ndarray, n_strata: int, has_exclusions: bool
) -> tuple[tuple[float, float, float, float], Text, list[LegendEntry]]:
    """Legend at the top right: strata in natural order with their counts, spares and
    inaccessible points when there are any, block, exclusion."""
    width, height = PAGE_SIZE
    lx, ly = 0.75 * width, 0.10 * height
    row_h, swatch_w = LEGEND_PT * PX_PER_PT * 1.45, 22.0
    max_label = width - MARGIN * width - lx - swatch_w - 24
    rows: list[tuple[str, str, dict, str | None, int]] = []
    for i, style in enumerate(styles[: min(n_strata, MAX_LEGEND_STRATA)]):
        # the name in a direction isolate: a right-to-left name keeps its count after it
        label = f"Stratum \u2068{page_text(style['name'])}\u2069 ({int(counts[i])})"
        rows.append(("marker", label, style, style["name"], int(counts[i])))
    if n_strata > MAX_LEGEND_STRATA:
        rows.append(("none", f"... and {n_strata - MAX_LEGEND_STRATA} more strata", {}, None, 0))
    for i, kind in enumerate(STATUS_STYLES, start=n_strata):
        if counts[i]:
            rows.append(
                (
                    "marker",
                    f"{STATUS_STYLES[kind]['legend']} ({int(counts[i])})",
                    styles[i],
                    None,
                    int(counts[i]),
                )
            )
    rows.append(("block", "Block (id, variety)", {}, None, 0))
    if has_exclusions:
        rows.append(("exclusion", "Exclusion (not sampled)", {}, None, 0))
    title_h = 8 * PX_PER_PT * 1.6
    entries = []
    widest = 0.0
    for k, (kind, text, style, stratum, count) in enumerate(rows):
        cy = ly + title_h + 6 + (k + 0.5) * row_h
        fitted = _fit_width(text, LEGEND_PT, False, max_label)
        label = Text(lx + 10 + swatch_w + 8, cy, fitted, LEGEND_PT, anchor="lm", role="legend")
        widest = max(widest, text_width(fitted, LEGEND_PT))
        swatch = (lx + 10 + swatch_w / 2, cy)
        entries.append(
            LegendEntry(kind, label, swatch, style.get("colour", ""), style.get("shape", ""), stratum, count)
        )
    # 5 % slack: matplotlib (the PDF) sets the same text a little wider than FreeType
    legend_w = max(10 + swatch_w + 8 + 1.05 * widest + 12, text_width("Legend", 8, True) + 24)
    box = (lx, ly, lx + legend_w, ly + title_h + 6 + len(rows) * row_h + 6)
    title = Text(
        lx + legend_w / 2, ly + 6 + title_h / 2, "Legend", 8, bold=True, anchor="mm", role="legend-title"
    )
    return box, title, entries


def _place_arrow(
    north: float, frame: tuple, xy: np.ndarray, radius: float, taken: list, side: tuple[float, float]
) -> dict:
    """North arrow in the first map corner with no point or label under it, else at ``side``."""
    probe = _arrow_at(0.0, 0.0, north, True)["box"]
    half_w, half_h = (probe[2] - probe[0]) / 2, (probe[3] - probe[1]) / 2
    off_x, off_y = (probe[0] + probe[2]) / 2, (probe[1] + probe[3]) / 2
    for corner in _ARROW_CORNERS:
        cx = frame[2] - _CORNER_INSET - half_w if corner[1] == "r" else frame[0] + _CORNER_INSET + half_w
        cy = frame[1] + _CORNER_INSET + half_h if corner[0] == "t" else frame[3] - _CORNER_INSET - half_h
        candidate = _arrow_at(cx - off_x, cy - off_y, north, True)
        if not _boxes_hit(candidate["box"], xy, radius, taken):
            return candidate | {"corner": corner}
    # Every corner holds points: the arrow goes in the margin right of the map, below the legend.
    return _arrow_at(side[0] + half_w - off_x, side[1] + half_h - off_y, north, False) | {"corner": ""}


def _place_scale_bar(
    frame: tuple, length_m: float, scale: float, xy: np.ndarray, radius: float, taken: list, side: tuple
) -> dict:
    """Scale bar in the first map corner clear of points, labels and the arrow, else at ``side``."""
    for corner in _BAR_CORNERS:
        candidate = _scale_bar_at(corner, frame, length_m, scale, True)
        if not _boxes_hit(candidate["box"], xy, radius, taken):
            return candidate
    return _scale_bar_at("", frame, length_m, scale, False, origin=side)


def page_layout(plan: Any, *, title: str | None = None) -> PageLayout:
    """Lay out the printable page of ``plan`` (no drawing; see ``fieldplan.write.png``)."""
    width, height = PAGE_SIZE
    points = plan.points
    status = _status_code(points)
    n_spare = int((status == 1 + list(STATUS_STYLES).index("spare")).sum())
    n_gone = int((status == 1 + list(STATUS_STYLES).index("inaccessible")).sum())
    texts = _head_and_cautions(plan, title, len(points) - n_spare, n_spare, n_gone)
    caution_top = min(t.y for t in texts if t.role == "caution")
    box, frame, scale, extent = _map_frame(plan, min(0.88 * height, caution_top - 0.02 * height))
    to_page = _transform(frame, extent, scale)

    block_rings = _rings(plan.blocks.geometry.values, to_page)
    exclusions = getattr(plan, "exclusions", None)
    has_exclusions = exclusions is not None and len(exclusions) > 0
    geoms = exclusions.to_crs(plan.crs).geometry.values if has_exclusions else []
    exclusion_rings = _rings(geoms, to_page)

    world, point_style, styles = _point_layer(points, status)
    n_strata = len(styles) - len(STATUS_STYLES)
    xy = to_page(world) if len(world) else np.empty((0, 2))
    marker = marker_diameter(len(points))
    labels = _block_labels(plan.blocks, to_page)
    counts = np.bincount(point_style, minlength=len(styles))
    legend_box, legend_title, entries = _legend(styles, counts, n_strata, len(exclusion_rings) > 0)

    north = true_north_bearing(plan.crs, (extent[0] + extent[2]) / 2, (extent[1] + extent[3]) / 2)
    radius = marker / 2 + 1
    label_boxes = [t.box() for t in labels]
    side_x = max(frame[2], box[2]) + 0.02 * width
    side_y = legend_box[3] + 16
    arrow = _place_arrow(north, frame, xy, radius, label_boxes, (side_x, side_y))
    if not arrow["on_map"]:
        side_y = arrow["box"][3] + 16
    bar_m = nice_length((extent[2] - extent[0]) / 5)
    taken = [*label_boxes, arrow["box"]]
    bar = _place_scale_bar(frame, bar_m, scale, xy, radius, taken, (side_x, side_y))

    return PageLayout(
        size=(width, height),
        dpi=DPI,
        frame=frame,
        extent=extent,
        scale=scale,
        crs=plan.crs,
        blocks=block_rings,
        exclusions=exclusion_rings,
        points=xy,
        point_style=point_style,
        styles=styles,
        n_strata=n_strata,
        marker=marker,
        labels=labels,
        legend_box=legend_box,
        legend_title=legend_title,
        legend=entries,
        legend_marker=LEGEND_PT * PX_PER_PT,
        north=north,
        arrow=arrow,
        scale_bar=bar,
        texts=texts,
    )
