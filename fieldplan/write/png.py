"""plan.png (and plan.pdf): a printable A4 landscape page of the plan.

Blocks with their id and variety, hatched exclusions, sample points by stratum
(colour *and* marker shape), spares, a north arrow turned to true north, a scale
bar, a legend, the plan id, seed and date, and the field cautions. Where each
thing goes is decided once, in :func:`fieldplan.write.page.page_layout`; this module
renders that layout:

* plan.png with Pillow: shapes are drawn on a palette canvas at :data:`SUPERSAMPLE`
  times the page resolution (points stamped from coordinate arrays, one array
  assignment per marker shape), reduced to 150 dpi by averaging, then text is drawn
  at the final size with DejaVu Sans (antialiased by FreeType).
* plan.pdf with matplotlib (imported only for the PDF), from the same layout.

Bytes are stable: the PNG carries no software tag and the PDF no creation date.
"""

from __future__ import annotations

import io
import math
import struct
import zlib
from functools import lru_cache
from pathlib import Path
from typing import Any

import numpy as np

from fieldplan.write.page import (
    A4_LANDSCAPE_IN,
    COLOURS,
    DPI,
    MAX_LABELLED_BLOCKS,
    MAX_LEGEND_STRATA,
    PX_PER_PT,
    PageLayout,
    Rings,
    Text,
    font,
    legend_colours,
    nice_length,
    page_layout,
    page_styles,
    true_north_bearing,
)
from fieldplan.write.safe import atomic_write_bytes

__all__ = [
    "A4_LANDSCAPE_IN",
    "MARKERS",
    "MAX_LABELLED_BLOCKS",
    "MAX_LEGEND_STRATA",
    "SUPERSAMPLE",
    "nice_length",
    "true_north_bearing",
    "plan_figure",
    "legend_colours",
    "page_styles",
    "page_layout",
    "render_png",
    "render_figure",
    "plan_image_bytes",
    "write_png",
    "write_pdf",
    "png_writer",
]

#: matplotlib marker of each shape (the PDF renderer).
MARKERS = {
    "circle": "o",
    "square": "s",
    "triangle": "^",
    "diamond": "D",
    "triangle-down": "v",
    "hexagon": "h",
    "cross": "X",
    "circle-x": "o",  # with an "x" drawn over it
}
#: Shapes are drawn at this many times the page resolution, then averaged down.
SUPERSAMPLE = 3
_HATCH_PERIOD = 9.0  # px between hatch lines, along the page axes
_HATCH_WIDTH = 1.2  # px
# Line widths in page pixels: the matplotlib page's 1.2, 0.8, 0.5 and 0.8 pt.
BLOCK_EDGE_PX = 1.2 * PX_PER_PT
EXCLUSION_EDGE_PX = 0.8 * PX_PER_PT
MARKER_EDGE_PX = 0.5 * PX_PER_PT
FRAME_PX = 0.8 * PX_PER_PT / 1.5
HALO_PX = 3  # white outline of labels over points: the 3 pt stroke of the matplotlib page, in px
SWATCH_HALF = (11.0, 6.5)  # legend swatch of a block or exclusion, half width and height
#: zlib level of plan.png: 3 writes a file a fifth larger than 6 in half the time.
PNG_COMPRESSION = 3


def _rgb(colour: str) -> tuple[int, int, int]:
    colour = colour.lstrip("#")
    return tuple(int(colour[i : i + 2], 16) for i in (0, 2, 4))  # type: ignore[return-value]


# ---------------------------------------------------------------------------- marker shapes

# Vertices of the convex shapes for a marker of size 1, clockwise on the page (y down):
# matplotlib's proportions, so plan.png and plan.pdf show the same symbols.
_SHAPES: dict[str, np.ndarray] = {
    "square": np.array([(-0.5, -0.5), (0.5, -0.5), (0.5, 0.5), (-0.5, 0.5)]),
    "diamond": np.array([(0.0, -1.0), (1.0, 0.0), (0.0, 1.0), (-1.0, 0.0)]) * math.sqrt(0.5),
    "triangle": np.array([(0.0, -0.5), (0.5, 0.5), (-0.5, 0.5)]),
    "triangle-down": np.array([(0.0, 0.5), (-0.5, -0.5), (0.5, -0.5)]),
    "hexagon": 0.5 * np.array([(math.cos(a), math.sin(a)) for a in np.radians(np.arange(6) * 60.0 - 90.0)]),
}


def _inside(shape: str, px: np.ndarray, py: np.ndarray, size: float, inset: float = 0.0) -> np.ndarray:
    """Which offsets ``(px, py)`` from the centre lie in ``shape`` of ``size``, ``inset`` in from its sides."""
    if shape == "circle":
        return np.hypot(px, py) <= size / 2 - inset
    if shape == "cross":  # an X of two bars, a third of the size wide
        u, v = (px + py) / math.sqrt(2), (px - py) / math.sqrt(2)
        half, reach = size / 6 - inset, 0.55 * size - inset
        return ((np.abs(u) <= half) & (np.abs(v) <= reach)) | ((np.abs(v) <= half) & (np.abs(u) <= reach))
    verts = _SHAPES.get(shape, _SHAPES["square"]) * size
    inside = np.ones(np.broadcast(px, py).shape, dtype=bool)
    for (x0, y0), (x1, y1) in zip(verts, np.roll(verts, -1, axis=0), strict=True):
        # signed distance from each side, positive inside (clockwise polygon, y down)
        distance = ((x1 - x0) * (py - y0) - (y1 - y0) * (px - x0)) / math.hypot(x1 - x0, y1 - y0)
        inside &= distance >= inset
    return inside


@lru_cache(maxsize=64)
def _sprite(shape: str, diameter: float, edge: float) -> tuple[np.ndarray, np.ndarray]:
    """A marker at canvas scale: flat pixel offsets ``(dy, dx)`` of every inked pixel and
    whether each is fill (else edge).

    The edge is centred on the outline (half of it outside the shape), as matplotlib strokes.
    """
    reach = int(math.ceil(0.75 * diameter + edge)) + 1
    dy, dx = np.mgrid[-reach : reach + 1, -reach : reach + 1].astype(float)
    base = "circle" if shape == "circle-x" else shape
    outer = _inside(base, dx, dy, diameter, inset=-edge / 2).ravel()
    inner = _inside(base, dx, dy, diameter, inset=edge / 2).ravel()
    if shape == "circle-x":  # struck through: an X of edge-wide bars across the circle
        bars = (np.abs(dx + dy) <= edge / 2 * math.sqrt(2)) | (np.abs(dx - dy) <= edge / 2 * math.sqrt(2))
        inner &= ~bars.ravel()
    offsets = np.column_stack([dy.ravel()[outer], dx.ravel()[outer]]).astype(np.int64)
    return offsets, inner[outer]


def _stamp(
    canvas: np.ndarray,
    xy: np.ndarray,
    shapes: np.ndarray,
    fill: np.ndarray,
    edge_index: int,
    diameter: float,
    edge: float,
) -> None:
    """Stamp markers into ``canvas`` (a 2-D array of palette indices), one array assignment per shape.

    ``xy`` are canvas pixel coordinates, ``shapes`` the shape name and ``fill`` the palette
    index of each point. Points of one shape are drawn in array order (later ones on top);
    a marker reaching past the array's edge is cut there.
    """
    if not len(xy):
        return
    h, w = canvas.shape
    flat = canvas.reshape(-1)
    ij = np.rint(xy).astype(np.int64)
    for shape in dict.fromkeys(shapes.tolist()):
        offsets, is_fill = _sprite(shape, float(diameter), float(edge))
        reach = int(np.abs(offsets).max(initial=0))
        sel = shapes == shape
        whole = (ij[:, 0] >= reach) & (ij[:, 0] < w - reach) & (ij[:, 1] >= reach) & (ij[:, 1] < h - reach)
        flat_offsets = offsets[:, 0] * w + offsets[:, 1]
        edge_value = np.uint8(edge_index)
        inner = sel & whole  # the usual case: whole markers, one fancy-index assignment
        if inner.any():
            values = np.where(is_fill[None, :], fill[inner][:, None], edge_value)
            flat[(ij[inner, 1] * w + ij[inner, 0])[:, None] + flat_offsets[None, :]] = values
        cut = sel & ~whole  # markers reaching past the edge: only their pixels inside
        if cut.any():
            ys = ij[cut, 1][:, None] + offsets[:, 0][None, :]
            xs = ij[cut, 0][:, None] + offsets[:, 1][None, :]
            values = np.where(is_fill[None, :], fill[cut][:, None], edge_value)
            ok = (xs >= 0) & (xs < w) & (ys >= 0) & (ys < h)
            flat[(ys * w + xs)[ok]] = values[ok]


# ---------------------------------------------------------------------------- Pillow renderer


class _Palette:
    """Colours of the palette canvas: index 0 is the paper."""

    def __init__(self) -> None:
        self.index: dict[str, int] = {}
        self.add(COLOURS["paper"])

    def add(self, colour: str) -> int:
        key = colour.lower()
        if key not in self.index:
            self.index[key] = len(self.index)
        return self.index[key]

    def __getitem__(self, colour: str) -> int:
        return self.add(colour)

    def flat(self) -> list[int]:
        out: list[int] = []
        for colour in self.index:
            out.extend(_rgb(colour))
        return out


class _Canvas:
    """The palette image shapes are drawn on: the part of the page from ``origin`` (page px)
    that holds any shape, at :data:`SUPERSAMPLE` times the page resolution."""

    def __init__(self, origin: tuple[int, int], size: tuple[int, int], pal: _Palette) -> None:
        from PIL import Image, ImageDraw

        self.origin = np.asarray(origin, dtype=float)
        self.pal = pal
        self.image = Image.new("P", (size[0] * SUPERSAMPLE, size[1] * SUPERSAMPLE), 0)
        self.draw = ImageDraw.Draw(self.image)

    def xy(self, page_xy: Any) -> np.ndarray:
        """Page pixels to canvas pixels."""
        return (np.asarray(page_xy, dtype=float) - self.origin) * SUPERSAMPLE

    def box(self, page_box: tuple) -> tuple[int, int, int, int]:
        """A page box ``(x0, y0, x1, y1)`` in whole canvas pixels, clipped to the canvas."""
        (x0, y0), (x1, y1) = self.xy([page_box[:2], page_box[2:]])
        w, h = self.image.size
        return (
            min(max(int(np.floor(x0)), 0), w),
            min(max(int(np.floor(y0)), 0), h),
            min(max(int(np.ceil(x1)), 0), w),
            min(max(int(np.ceil(y1)), 0), h),
        )

    def pixels(self, box: tuple[int, int, int, int]) -> _Pixels:
        return _Pixels(self.image, box)


class _Pixels:
    """A region of the palette canvas as a writable array; pasted back on exit."""

    def __init__(self, image: Any, box: tuple[int, int, int, int]) -> None:
        self.image, self.box = image, box

    def __enter__(self) -> np.ndarray:
        self.array = np.array(self.image.crop(self.box))
        return self.array

    def __exit__(self, *exc: object) -> None:
        from PIL import Image

        h, w = self.array.shape
        region = Image.frombuffer("P", (w, h), np.ascontiguousarray(self.array), "raw", "P", 0, 1)
        self.image.paste(region, self.box[:2])


def _fill_rings(canvas: _Canvas, rings: Rings, fill: int, hatch: int | None = None) -> None:
    """Fill polygons (holes left open) through one mask, and hatch them if asked."""
    from PIL import Image, ImageDraw

    box = canvas.box((*rings.xy.min(axis=0) - 1, *rings.xy.max(axis=0) + 1))
    x0, y0, x1, y1 = box
    if x1 <= x0 or y1 <= y0:
        return
    mask = Image.new("L", (x1 - x0, y1 - y0), 0)
    draw = ImageDraw.Draw(mask)
    xy = canvas.xy(rings.xy) - np.array([x0, y0])
    for i in range(len(rings)):  # one C call per ring; holes after their exterior
        ring = xy[rings.start[i] : rings.start[i + 1]]
        if len(ring) >= 3:
            draw.polygon(ring.ravel().tolist(), fill=0 if rings.hole[i] else 255)
    canvas.image.paste(fill, box, mask)
    if hatch is not None:
        ss = SUPERSAMPLE
        period, width = _HATCH_PERIOD * ss, _HATCH_WIDTH * ss * math.sqrt(2)
        # the pattern is fixed to the page, so neighbouring exclusions hatch as one
        ox, oy = (canvas.origin * ss).astype(int)
        yy, xx = np.ogrid[y0 + oy : y1 + oy, x0 + ox : x1 + ox]
        hatched = (np.asarray(mask) > 0) & (((xx + yy) % period) < width)
        canvas.image.paste(hatch, box, Image.fromarray(hatched.astype(np.uint8) * 255, "L"))


def _stroke_rings(canvas: _Canvas, rings: Rings, edge: int, width_px: float) -> np.ndarray:
    """Stroke every ring (one C call per ring); returns the vertices (canvas px), where joins go."""
    width = max(int(round(width_px * SUPERSAMPLE)), 1)
    xy = canvas.xy(rings.xy)
    for i in range(len(rings)):
        ring = xy[rings.start[i] : rings.start[i + 1]]
        if len(ring) >= 2:
            canvas.draw.line(ring.ravel().tolist(), fill=edge, width=width)
    return xy


def _round_joins(
    arr: np.ndarray, vertices: np.ndarray, origin: tuple[int, int], edge: int, width_px: float
) -> None:
    """Discs at the vertices of stroked rings: round joins, stamped in one pass."""
    if len(vertices):
        diameter = max(round(width_px * SUPERSAMPLE), 1)
        shapes = np.full(len(vertices), "circle", dtype=object)
        fill = np.full(len(vertices), edge, dtype=np.uint8)
        _stamp(arr, vertices - np.asarray(origin), shapes, fill, edge, float(diameter), 0.0)


def _draw_arrow(canvas: _Canvas, arrow: dict) -> None:
    ink = canvas.pal[COLOURS["ink"]]
    tip, tail, head = (np.asarray(arrow[k], dtype=float) for k in ("tip", "tail", "head"))
    base = head[1:].mean(axis=0)
    # the shaft stops inside the head so its square end never shows beside the tip
    shaft = canvas.xy([tail, base + (tip - base) * 0.3])
    canvas.draw.line(shaft.ravel().tolist(), fill=ink, width=int(round(arrow["width"] * SUPERSAMPLE)))
    canvas.draw.polygon(canvas.xy(head).ravel().tolist(), fill=ink)


def _draw_scale_bar(canvas: _Canvas, bar: dict) -> None:
    pal = canvas.pal
    outline = pal[COLOURS["frame"]]
    canvas.draw.rectangle(
        canvas.box(bar["box"]), fill=pal[COLOURS["paper"]], outline=outline, width=SUPERSAMPLE
    )
    bar_box = canvas.box((bar["x0"], bar["y"], bar["x1"], bar["y"] + bar["height"]))
    canvas.draw.rectangle(bar_box, fill=pal[COLOURS["ink"]])


def _swatch_ring(cx: float, cy: float) -> Rings:
    w, h = SWATCH_HALF
    ring = np.array(
        [(cx - w, cy - h), (cx + w, cy - h), (cx + w, cy + h), (cx - w, cy + h), (cx - w, cy - h)]
    )
    return Rings(ring, np.array([0, 5]), np.array([False]))


def _legend_swatches(canvas: _Canvas, layout: PageLayout) -> None:
    pal = canvas.pal
    box = canvas.box(layout.legend_box)
    canvas.draw.rectangle(
        box, fill=pal[COLOURS["paper"]], outline=pal[COLOURS["legend_edge"]], width=SUPERSAMPLE
    )
    for entry in layout.legend:
        if entry.kind == "block":
            rings = _swatch_ring(*entry.swatch)
            _fill_rings(canvas, rings, pal[COLOURS["block"]])
            _stroke_rings(canvas, rings, pal[COLOURS["block_edge"]], BLOCK_EDGE_PX)
        elif entry.kind == "exclusion":
            rings = _swatch_ring(*entry.swatch)
            _fill_rings(canvas, rings, pal[COLOURS["exclusion"]], hatch=pal[COLOURS["exclusion_edge"]])
            _stroke_rings(canvas, rings, pal[COLOURS["exclusion_edge"]], EXCLUSION_EDGE_PX)
    markers = [e for e in layout.legend if e.kind == "marker"]
    if markers:
        with canvas.pixels(box) as arr:
            xy = canvas.xy([e.swatch for e in markers]) - np.array(box[:2])
            shapes = np.array([e.shape for e in markers], dtype=object)
            fill = np.array([pal[e.colour] for e in markers], dtype=np.uint8)
            edge = pal[COLOURS["marker_edge"]]
            _stamp(
                arr, xy, shapes, fill, edge, layout.legend_marker * SUPERSAMPLE, MARKER_EDGE_PX * SUPERSAMPLE
            )


def _draw_map(canvas: _Canvas, layout: PageLayout) -> None:
    """Blocks, exclusions and points, clipped to the frame; round joins and points stamped as arrays."""
    pal = canvas.pal
    frame = canvas.box(layout.frame)
    if len(layout.blocks):
        _fill_rings(canvas, layout.blocks, pal[COLOURS["block"]])
        joins = _stroke_rings(canvas, layout.blocks, pal[COLOURS["block_edge"]], BLOCK_EDGE_PX)
        with canvas.pixels(frame) as arr:
            _round_joins(arr, joins, frame[:2], pal[COLOURS["block_edge"]], BLOCK_EDGE_PX)
    joins = np.empty((0, 2))
    if len(layout.exclusions):
        _fill_rings(
            canvas, layout.exclusions, pal[COLOURS["exclusion"]], hatch=pal[COLOURS["exclusion_edge"]]
        )
        joins = _stroke_rings(canvas, layout.exclusions, pal[COLOURS["exclusion_edge"]], EXCLUSION_EDGE_PX)
    with canvas.pixels(frame) as arr:
        _round_joins(arr, joins, frame[:2], pal[COLOURS["exclusion_edge"]], EXCLUSION_EDGE_PX)
        styles = layout.styles
        shapes = np.array([s["shape"] for s in styles], dtype=object)[layout.point_style]
        fill = np.array([pal[s["colour"]] for s in styles], dtype=np.uint8)[layout.point_style]
        xy = canvas.xy(layout.points) - np.array(frame[:2])
        edge = pal[COLOURS["marker_edge"]]
        _stamp(arr, xy, shapes, fill, edge, layout.marker * SUPERSAMPLE, MARKER_EDGE_PX * SUPERSAMPLE)
    # Clip: whatever was drawn outside the frame (exclusions reaching past the blocks) goes.
    w, h = canvas.image.size
    fx0, fy0, fx1, fy1 = frame
    for x0, y0, x1, y1 in ((0, 0, w, fy0), (0, fy1, w, h), (0, 0, fx0, h), (fx1, 0, w, h)):
        if x1 > x0 and y1 > y0:
            canvas.draw.rectangle((x0, y0, x1 - 1, y1 - 1), fill=0)
    canvas.draw.rectangle(
        frame, outline=pal[COLOURS["frame"]], width=max(int(round(FRAME_PX * SUPERSAMPLE)), 1)
    )


def _draw_text(draw: Any, text: Text) -> None:
    face = font(text.size, text.bold)
    options: dict[str, Any] = {"fill": _rgb(text.colour), "font": face}
    if text.halo:
        options |= {"stroke_width": HALO_PX, "stroke_fill": (255, 255, 255)}
    try:
        draw.text((text.x, text.y), text.text, anchor=text.anchor, **options)
    except ValueError:  # a bitmap stand-in font takes no anchor
        draw.text((text.x, text.y), text.text, **options)


def _shapes_box(layout: PageLayout) -> tuple[int, int, int, int]:
    """The part of the page holding shapes (map, legend, arrow, scale bar), in whole page pixels."""
    boxes = np.array(
        [layout.frame, layout.legend_box, layout.arrow["box"], layout.scale_bar["box"]], dtype=float
    )
    width, height = layout.size
    x0, y0 = np.floor(boxes[:, :2].min(axis=0)).astype(int) - 4
    x1, y1 = np.ceil(boxes[:, 2:].max(axis=0)).astype(int) + 4
    return max(int(x0), 0), max(int(y0), 0), min(int(x1), width), min(int(y1), height)


def render_png(layout: PageLayout) -> bytes:
    """Draw ``layout`` with Pillow and return PNG bytes (150 dpi, no software tag).

    Shapes go on a palette canvas at :data:`SUPERSAMPLE` times the resolution, covering only
    the part of the page that holds shapes; it is averaged down (``Image.reduce``, a box
    filter) for antialiasing and pasted on the white page. Text is drawn last, at the
    final size, antialiased by FreeType.
    """
    from PIL import Image, ImageDraw

    pal = _Palette()
    for colour in [*COLOURS.values(), *(s["colour"] for s in layout.styles)]:
        pal.add(colour)
    x0, y0, x1, y1 = _shapes_box(layout)
    canvas = _Canvas((x0, y0), (x1 - x0, y1 - y0), pal)
    _draw_map(canvas, layout)
    _draw_scale_bar(canvas, layout.scale_bar)
    _draw_arrow(canvas, layout.arrow)
    _legend_swatches(canvas, layout)
    canvas.image.putpalette(pal.flat())

    page = Image.new("RGB", layout.size, _rgb(COLOURS["paper"]))
    page.paste(canvas.image.convert("RGB").reduce(SUPERSAMPLE), (x0, y0))
    draw = ImageDraw.Draw(page)
    texts = [*layout.labels, layout.arrow["label"], layout.scale_bar["label"], layout.legend_title]
    texts += [entry.label for entry in layout.legend] + list(layout.texts)
    for text in texts:
        _draw_text(draw, text)
    return encode_png(np.asarray(page), layout.dpi)


def _chunk(kind: bytes, data: bytes) -> bytes:
    # reference: PNG specification (ISO/IEC 15948) section 5.3: length, type, data, CRC-32 of type + data
    return (
        struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF)
    )


def encode_png(rgb: np.ndarray, dpi: int) -> bytes:
    """PNG bytes of an ``(h, w, 3)`` uint8 image: IHDR, pHYs (``dpi``), one IDAT, IEND; no text chunk.

    Every row uses filter 0 (none): on a page that is mostly flat colour, zlib alone packs
    it smaller than adaptive filtering, in about a third of Pillow's time.
    """
    h, w, _ = rgb.shape
    rows = np.empty((h, 1 + 3 * w), dtype=np.uint8)
    rows[:, 0] = 0  # filter type None
    rows[:, 1:] = rgb.reshape(h, 3 * w)
    ppm = int(round(dpi / 0.0254))  # pixels per metre
    return b"".join(
        [
            b"\x89PNG\r\n\x1a\n",
            _chunk(b"IHDR", struct.pack(">IIBBBBB", w, h, 8, 2, 0, 0, 0)),  # 8-bit truecolour
            _chunk(b"pHYs", struct.pack(">IIB", ppm, ppm, 1)),  # unit 1: metre
            _chunk(b"IDAT", zlib.compress(rows.tobytes(), PNG_COMPRESSION)),
            _chunk(b"IEND", b""),
        ]
    )


# ---------------------------------------------------------------------------- matplotlib renderer (PDF)


def _patches(geoms: Any, **style: Any) -> Any:
    """One path patch per polygon (exterior, then holes), built from shapely's coordinate arrays."""
    import shapely
    from matplotlib.collections import PatchCollection
    from matplotlib.patches import PathPatch
    from matplotlib.path import Path as MplPath

    parts = shapely.get_parts(np.asarray([g for g in geoms if g is not None], dtype=object))
    polys = parts[(shapely.get_type_id(parts) == 3) & ~shapely.is_empty(parts)]
    if polys.size == 0:
        return PatchCollection([], match_original=False, **style)
    rings, ring_poly = shapely.get_rings(polys, return_index=True)
    verts, vert_ring = shapely.get_coordinates(rings, return_index=True)
    new_ring = np.r_[True, vert_ring[1:] != vert_ring[:-1]]
    codes = np.full(len(verts), MplPath.LINETO, dtype=MplPath.code_type)
    codes[new_ring] = MplPath.MOVETO
    codes[np.r_[new_ring[1:], True]] = MplPath.CLOSEPOLY
    cuts = np.flatnonzero(np.diff(ring_poly[vert_ring])) + 1
    patches = [
        PathPatch(MplPath(v, c)) for v, c in zip(np.split(verts, cuts), np.split(codes, cuts), strict=True)
    ]
    return PatchCollection(patches, match_original=False, **style)


def _ring_patches(rings: Rings, **style: Any) -> Any:
    """The layout's rings as one matplotlib collection (a path per polygon)."""
    from matplotlib.collections import PatchCollection
    from matplotlib.patches import PathPatch
    from matplotlib.path import Path as MplPath

    if not len(rings):
        return PatchCollection([], match_original=False, **style)
    n = len(rings.xy)
    codes = np.full(n, MplPath.LINETO, dtype=MplPath.code_type)
    codes[rings.start[:-1]] = MplPath.MOVETO
    codes[rings.start[1:] - 1] = MplPath.CLOSEPOLY
    polygon = np.cumsum(~rings.hole) - 1
    cuts = rings.start[1:-1][np.diff(polygon) != 0]
    patches = [
        PathPatch(MplPath(v, c)) for v, c in zip(np.split(rings.xy, cuts), np.split(codes, cuts), strict=True)
    ]
    return PatchCollection(patches, match_original=False, **style)


_ISOLATES = dict.fromkeys(range(0x2066, 0x206A))
_VA = {"a": "top", "m": "center", "s": "baseline", "d": "bottom"}
_HA = {"l": "left", "m": "center", "r": "right"}


def _mpl_text(ax: Any, text: Text) -> Any:
    from matplotlib.patheffects import withStroke

    return ax.text(
        text.x,
        text.y,
        text.text.translate(_ISOLATES),  # matplotlib lays text out left to right, without bidi
        fontsize=text.size,
        fontweight="bold" if text.bold else "normal",
        color=text.colour,
        ha=_HA[text.anchor[0]],
        va=_VA[text.anchor[1]],
        parse_math=False,  # a '$' in a name is text, not TeX
        path_effects=[withStroke(linewidth=3, foreground="white")] if text.halo else None,
        zorder=8,
        clip_on=False,
    )


def render_figure(layout: PageLayout) -> Any:
    """Draw ``layout`` on a :class:`matplotlib.figure.Figure` (Agg canvas attached), in page pixels."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.patches import Polygon, Rectangle

    width, height = layout.size
    fig = Figure(figsize=A4_LANDSCAPE_IN, dpi=layout.dpi)  # the layout spans the whole page
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0, 0, 1, 1))
    ax.set_xlim(0, width)
    ax.set_ylim(height, 0)
    ax.set_axis_off()
    fx0, fy0, fx1, fy1 = layout.frame
    clip = Rectangle((fx0, fy0), fx1 - fx0, fy1 - fy0, transform=ax.transData, facecolor="none")
    pt = 1 / PX_PER_PT
    blocks = _ring_patches(
        layout.blocks, facecolor=COLOURS["block"], edgecolor=COLOURS["block_edge"], linewidth=1.2
    )
    excl = _ring_patches(
        layout.exclusions,
        facecolor=COLOURS["exclusion"],
        edgecolor=COLOURS["exclusion_edge"],
        hatch="////",
        linewidth=0.8,
    )
    for collection in (blocks, excl):
        ax.add_collection(collection)
        collection.set_clip_path(clip)
    xy, codes = layout.points, layout.point_style
    for code, style in enumerate(layout.styles):
        sel = codes == code
        if sel.any():
            dots = ax.scatter(
                xy[sel, 0],
                xy[sel, 1],
                s=(layout.marker * pt) ** 2,
                marker=MARKERS[style["shape"]],
                c=style["colour"],
                edgecolors=COLOURS["marker_edge"],
                linewidths=0.5,
                zorder=3,
            )
            dots.set_clip_path(clip)
            if style["shape"] == "circle-x":
                strike = ax.scatter(
                    xy[sel, 0],
                    xy[sel, 1],
                    s=(layout.marker * pt) ** 2 * 0.5,
                    marker="x",
                    c=COLOURS["marker_edge"],
                    linewidths=0.8,
                    zorder=3,
                )
                strike.set_clip_path(clip)
    ax.add_patch(
        Rectangle(
            (fx0, fy0), fx1 - fx0, fy1 - fy0, fill=False, edgecolor=COLOURS["frame"], linewidth=0.8, zorder=4
        )
    )
    for text in layout.labels:
        _mpl_text(ax, text)

    bar = layout.scale_bar
    bx0, by0, bx1, by1 = bar["box"]
    ax.add_patch(
        Rectangle(
            (bx0, by0),
            bx1 - bx0,
            by1 - by0,
            facecolor="white",
            edgecolor=COLOURS["frame"],
            linewidth=0.5,
            zorder=6,
        )
    )
    ax.add_patch(
        Rectangle((bar["x0"], bar["y"]), bar["x1"] - bar["x0"], bar["height"], color=COLOURS["ink"], zorder=7)
    )
    _mpl_text(ax, bar["label"])
    arrow = layout.arrow
    head = np.asarray(arrow["head"])
    base = head[1:].mean(axis=0)
    end = base + (np.asarray(arrow["tip"]) - base) * 0.3
    (shaft,) = ax.plot(
        [arrow["tail"][0], end[0]],
        [arrow["tail"][1], end[1]],
        color=COLOURS["ink"],
        linewidth=arrow["width"] * pt,
        zorder=6,
        solid_capstyle="butt",
    )
    head_patch = ax.add_patch(Polygon(head, closed=True, color=COLOURS["ink"], zorder=6))
    for artist in (shaft, head_patch, _mpl_text(ax, arrow["label"])):
        artist.set_gid("north-arrow")  # so a figure's arrow can be found (and checked)

    lx0, ly0, lx1, ly1 = layout.legend_box
    ax.add_patch(
        Rectangle(
            (lx0, ly0),
            lx1 - lx0,
            ly1 - ly0,
            facecolor="white",
            edgecolor=COLOURS["legend_edge"],
            linewidth=0.8,
            zorder=4,
        )
    )
    _mpl_text(ax, layout.legend_title)
    for entry in layout.legend:
        cx, cy = entry.swatch
        if entry.kind == "marker":
            ax.scatter(
                [cx],
                [cy],
                s=(layout.legend_marker * pt) ** 2,
                marker=MARKERS[entry.shape],
                c=entry.colour,
                edgecolors=COLOURS["marker_edge"],
                linewidths=0.5,
                zorder=5,
            )
            if entry.shape == "circle-x":
                size = (layout.legend_marker * pt) ** 2 * 0.5
                ax.scatter([cx], [cy], s=size, marker="x", c=COLOURS["marker_edge"], linewidths=0.8, zorder=5)
        elif entry.kind == "block":
            ax.add_patch(
                Rectangle(
                    (cx - SWATCH_HALF[0], cy - SWATCH_HALF[1]),
                    2 * SWATCH_HALF[0],
                    2 * SWATCH_HALF[1],
                    facecolor=COLOURS["block"],
                    edgecolor=COLOURS["block_edge"],
                    linewidth=1.2,
                    zorder=5,
                )
            )
        elif entry.kind == "exclusion":
            ax.add_patch(
                Rectangle(
                    (cx - SWATCH_HALF[0], cy - SWATCH_HALF[1]),
                    2 * SWATCH_HALF[0],
                    2 * SWATCH_HALF[1],
                    facecolor=COLOURS["exclusion"],
                    edgecolor=COLOURS["exclusion_edge"],
                    hatch="////",
                    linewidth=0.8,
                    zorder=5,
                )
            )
        _mpl_text(ax, entry.label)
    for text in layout.texts:
        _mpl_text(ax, text)
    return fig


def plan_figure(plan: Any, *, title: str | None = None) -> Any:
    """The page as a :class:`matplotlib.figure.Figure` (for the PDF and notebooks)."""
    return render_figure(page_layout(plan, title=title))


def plan_image_bytes(plan: Any, *, fmt: str = "png") -> bytes:
    """Render the page as PNG or PDF bytes; identical plans give identical bytes."""
    if fmt not in ("png", "pdf"):
        from fieldplan.errors import OptionError

        raise OptionError(f"printable page format must be 'png' or 'pdf', got {fmt!r}")
    layout = page_layout(plan)
    if fmt == "png":
        return render_png(layout)
    buf = io.BytesIO()
    render_figure(layout).savefig(
        buf, format="pdf", dpi=DPI, metadata={"CreationDate": None, "Producer": None}
    )
    return buf.getvalue()


def write_png(plan: Any, path: Path | str) -> Path:
    """Write the printable page as PNG (atomically) and return its path."""
    path = Path(path)
    atomic_write_bytes(path, plan_image_bytes(plan, fmt="png"))
    return path


def write_pdf(plan: Any, path: Path | str) -> Path:
    """Write the printable page as a one-page PDF (atomically) and return its path."""
    path = Path(path)
    atomic_write_bytes(path, plan_image_bytes(plan, fmt="pdf"))
    return path


def png_writer(plan: Any, folder: Path) -> None:
    """Plan-folder writer (``fieldplan.store.WRITERS``): ``plan.png``."""
    write_png(plan, Path(folder) / "plan.png")
