"""plan.png (and plan.pdf): a printable A4 landscape page of the plan.

Blocks with their id and variety, hatched exclusions, sample points by stratum
(colour *and* marker shape), a north arrow turned to true north, a scale bar,
a legend, the plan id, seed and date, and the field cautions. Drawn with
matplotlib's Agg canvas on a private Figure (no pyplot state), in the plan's
metric CRS so the scale bar is exact. Bytes are stable: the PNG carries no
software tag and the PDF no creation date.
"""

from __future__ import annotations

import io
import math
import textwrap
from pathlib import Path
from typing import Any

import numpy as np
import shapely

from fieldplan.words import plural
from fieldplan.write.html_map import PALETTE, plan_caption, stratum_styles
from fieldplan.write.safe import atomic_write_bytes

__all__ = [
    "A4_LANDSCAPE_IN",
    "MARKERS",
    "nice_length",
    "true_north_bearing",
    "plan_figure",
    "legend_colours",
    "page_styles",
    "plan_image_bytes",
    "write_png",
    "write_pdf",
    "png_writer",
]

A4_LANDSCAPE_IN = (297 / 25.4, 210 / 25.4)  # ISO 216 A4, 297 mm x 210 mm
DPI = 150
MARKERS = {
    "circle": "o",
    "square": "s",
    "triangle": "^",
    "diamond": "D",
    "triangle-down": "v",
    "hexagon": "h",
}
MAX_LEGEND_STRATA = 24
#: Above this many blocks the page carries no block labels: at A4 they overlap
#: into an unreadable mass, and drawing them dominated the time to write a plan.
MAX_LABELLED_BLOCKS = 200


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


def legend_colours(n: int) -> list[str]:
    """``n`` different colours: Okabe & Ito's, then Tol's muted, then evenly spaced hues."""
    from matplotlib.colors import hsv_to_rgb, to_hex

    colours = [*PALETTE, *TOL_MUTED][:n]
    extra = n - len(colours)
    if extra > 0:
        # Hues spread evenly, alternating two lightness levels so neighbours differ twice.
        hues = (np.arange(extra) / extra + 0.03) % 1.0
        values = np.where(np.arange(extra) % 2 == 0, 0.85, 0.55)
        rgb = hsv_to_rgb(np.column_stack([hues, np.full(extra, 0.75), values]))
        taken = {c.lower() for c in colours}
        for row in rgb:
            colour = to_hex(row)
            while colour.lower() in taken:  # never the same colour twice, however close
                row = np.clip(row * 0.98, 0, 1)
                colour = to_hex(row)
            taken.add(colour.lower())
            colours.append(colour)
    return colours


def page_styles(strata) -> dict[str, dict[str, str]]:
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


def nice_length(span_m: float) -> float:
    """Largest 1-2-5 x 10^k length not above ``span_m`` (at least 1 m)."""
    if not span_m > 1:
        return 1.0
    power = 10 ** math.floor(math.log10(span_m))
    for step in (5, 2, 1):
        if step * power <= span_m:
            return float(step * power)
    return float(power)


def true_north_bearing(crs, x: float, y: float) -> float:
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


def _patches(geoms, **style):
    """One path patch per polygon (exterior, then holes), built from shapely's coordinate arrays."""
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
        PathPatch(MplPath(v, c))
        for v, c in zip(np.split(verts, cuts), np.split(codes, cuts), strict=True)
    ]
    return PatchCollection(patches, match_original=False, **style)


def _scatter_by_marker(ax, xy: np.ndarray, strata: np.ndarray, styles: dict, size: float) -> None:
    """Points of many strata: one scatter per marker shape, colours per point.

    Points keep the strata's order inside each shape; one call per stratum
    would cost a matplotlib collection per stratum.
    """
    names = list(styles)
    index = {name: i for i, name in enumerate(names)}
    uniq, inverse = np.unique(strata, return_inverse=True)
    code = np.array([index[u] for u in uniq.tolist()], dtype=np.int64)[inverse.ravel()]
    shapes = np.array([styles[n]["shape"] for n in names], dtype=object)
    colours = np.array([styles[n]["colour"] for n in names], dtype=object)
    order = np.argsort(code, kind="stable")
    for shape in dict.fromkeys(shapes.tolist()):
        sel = order[shapes[code[order]] == shape]
        if not sel.size:
            continue
        ax.scatter(
            xy[sel, 0],
            xy[sel, 1],
            s=size,
            marker=MARKERS[shape],
            c=colours[code[sel]].tolist(),
            edgecolors="#1a1a1a",
            linewidths=0.5,
            zorder=3,
        )


# Where the north arrow may go, in axes fraction: its centre, tried in this order (the
# scale bar holds the lower left). Each spot is a box of _ARROW_BOX around the centre.
_ARROW_SPOTS = ((0.94, 0.88), (0.06, 0.88), (0.94, 0.14))
_ARROW_BOX = (0.10, 0.20)


def _north_arrow(fig, ax, north: float, occupied: np.ndarray, halo) -> None:
    """Draw the north arrow in a map corner with no point or label under it, else beside the map.

    ``occupied`` are data coordinates of points and block labels. The arrow and its
    "N" carry ``gid="north-arrow"`` so tests can find them.
    """
    frac = ax.transAxes.inverted().transform(ax.transData.transform(occupied)) if len(occupied) else occupied
    spot, transform, target = None, ax.transAxes, ax
    half_w, half_h = _ARROW_BOX[0] / 2, _ARROW_BOX[1] / 2
    for cx, cy in _ARROW_SPOTS:
        if not len(frac) or not (
            (np.abs(frac[:, 0] - cx) <= half_w) & (np.abs(frac[:, 1] - cy) <= half_h)
        ).any():
            spot = (cx, cy)
            break
    if spot is None:
        # Every corner holds points: the arrow goes in the margin right of the map, below the legend.
        box = ax.get_position()
        spot, transform, target = (box.x1 + 0.03, box.y0 + 0.08), fig.transFigure, fig
    cx, cy = spot
    length = 0.08 if target is ax else 0.06
    dx = length * math.sin(math.radians(north))
    dy = length * math.cos(math.radians(north))
    if target is fig:
        # Figure fractions are not square on A4 landscape: keep the arrow's true direction.
        width, height = fig.get_size_inches()
        dx *= height / width
    arrow = ax.annotate(
        "",
        xy=(cx + dx / 2, cy + dy / 2),
        xytext=(cx - dx / 2, cy - dy / 2),
        xycoords=transform,
        annotation_clip=False,
        arrowprops={"arrowstyle": "-|>,head_width=0.4,head_length=0.8", "color": "#111111", "linewidth": 2},
    )
    arrow.set_gid("north-arrow")
    label = ax.text(
        cx + 0.7 * dx,
        cy + 0.7 * dy,
        "N",
        transform=transform,
        ha="center",
        va="center",
        fontsize=11,
        fontweight="bold",
        path_effects=halo,
        parse_math=False,
        clip_on=False,
    )
    label.set_gid("north-arrow")


def _text(ax, x, y, s, **kw):
    # parse_math=False: a '$' in a block or stratum name is text, not TeX.
    return ax.text(x, y, s, parse_math=False, **kw)


def plan_figure(plan: Any, *, title: str | None = None):
    """Build the page as a :class:`matplotlib.figure.Figure` (Agg canvas attached)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    from matplotlib.patheffects import withStroke
    from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

    from fieldplan.safety import plan_cautions

    caption = plan_caption(plan)
    fig = Figure(figsize=A4_LANDSCAPE_IN, dpi=DPI)
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0.03, 0.12, 0.70, 0.78))
    ax.set_aspect("equal")
    ax.set_xticks([])
    ax.set_yticks([])
    for spine in ax.spines.values():
        spine.set_color("#888888")

    blocks = plan.blocks
    halo = [withStroke(linewidth=3, foreground="white")]
    ax.add_collection(
        _patches(blocks.geometry.values, facecolor="#fbfbf7", edgecolor="#333333", linewidth=1.2)
    )
    exclusions = getattr(plan, "exclusions", None)
    if exclusions is not None and len(exclusions):
        ax.add_collection(
            _patches(
                exclusions.to_crs(plan.crs).geometry.values,
                facecolor="#d9d9d9",
                edgecolor="#555555",
                hatch="////",
                linestyle="--",
                linewidth=0.8,
            )
        )

    points = plan.points
    styles = page_styles(points["stratum"].astype(str)) if len(points) else {}
    xy = shapely.get_coordinates(points.geometry.values) if len(points) else np.empty((0, 2))
    strata = points["stratum"].astype(str).to_numpy() if len(points) else np.array([])
    size = 28 if len(points) < 500 else (14 if len(points) < 5000 else 4)
    handles = []
    if len(styles) > MAX_LEGEND_STRATA:
        _scatter_by_marker(ax, xy, strata, styles, size)
    for i, (name, style) in enumerate(styles.items()):
        if i >= MAX_LEGEND_STRATA:
            break
        mask = strata == name
        marker = MARKERS[style["shape"]]
        if len(styles) <= MAX_LEGEND_STRATA:
            ax.scatter(
                xy[mask, 0],
                xy[mask, 1],
                s=size,
                marker=marker,
                c=style["colour"],
                edgecolors="#1a1a1a",
                linewidths=0.5,
                zorder=3,
            )
        handles.append(
            Line2D(
                [],
                [],
                linestyle="none",
                marker=marker,
                markersize=7,
                markerfacecolor=style["colour"],
                markeredgecolor="#1a1a1a",
                label=f"Stratum {name} ({int(mask.sum())})",
            )
        )
    if len(styles) > MAX_LEGEND_STRATA:
        handles.append(Patch(color="none", label=f"... and {len(styles) - MAX_LEGEND_STRATA} more strata"))

    labelled = 0 < len(blocks) <= MAX_LABELLED_BLOCKS
    if labelled:
        anchors = shapely.get_coordinates(shapely.point_on_surface(blocks.geometry.values))
        varieties = blocks["variety"].tolist() if "variety" in blocks else [None] * len(blocks)
        for (x, y), name, variety in zip(anchors, blocks["block"].tolist(), varieties, strict=True):
            label = str(name)
            if isinstance(variety, str) and variety:
                label += "\n" + variety
            _text(
                ax,
                x,
                y,
                label,
                ha="center",
                va="center",
                fontsize=7,
                fontweight="bold",
                color="#222222",
                path_effects=halo,
                zorder=4,
            )

    # Frame: the blocks' extent (or the points') with a margin.
    frame = blocks if len(blocks) else points
    if len(frame):
        minx, miny, maxx, maxy = (float(v) for v in frame.total_bounds)
    else:
        minx, miny, maxx, maxy = 0.0, 0.0, 100.0, 100.0
    pad = 0.05 * max(maxx - minx, maxy - miny, 10.0)
    ax.set_xlim(minx - pad, maxx + pad)
    ax.set_ylim(miny - pad, maxy + pad)
    ax.apply_aspect()
    x0, x1 = ax.get_xlim()
    y0, y1 = ax.get_ylim()

    bar = nice_length((x1 - x0) / 5)
    bar_label = f"{bar / 1000:g} km" if bar >= 1000 else f"{bar:g} m"
    ax.add_artist(
        AnchoredSizeBar(
            ax.transData,
            bar,
            bar_label,
            "lower left",
            pad=0.6,
            frameon=True,
            size_vertical=(y1 - y0) / 300,
            color="#111111",
            fontproperties={"size": 8},
        )
    )

    north = true_north_bearing(plan.crs, (x0 + x1) / 2, (y0 + y1) / 2)
    occupied = xy
    if labelled:
        occupied = np.concatenate([xy, anchors]) if len(xy) else anchors
    _north_arrow(fig, ax, north, occupied, halo)

    handles.append(Patch(facecolor="#fbfbf7", edgecolor="#333333", label="Block (id, variety)"))
    if exclusions is not None and len(exclusions):
        handles.append(
            Patch(
                facecolor="#d9d9d9",
                edgecolor="#555555",
                hatch="////",
                linestyle="--",
                label="Exclusion (not sampled)",
            )
        )
    legend = fig.legend(
        handles=handles,
        loc="upper left",
        bbox_to_anchor=(0.75, 0.90),
        fontsize=7,
        frameon=True,
        title="Legend",
        title_fontsize=8,
    )
    for text in legend.get_texts():
        text.set_parse_math(False)

    head = title or f"Sampling plan {caption['plan_id']}"
    fig.text(0.03, 0.955, head, fontsize=13, fontweight="bold", parse_math=False)
    sub = (
        f"Seed {caption['seed']}   Date {caption['date'] or '-'}   Design {caption['design'] or '-'}"
        f"   {plural(len(points), 'point')} in {plural(len(blocks), 'block')}   CRS {plan.crs.name}"
    )
    if len(blocks) > MAX_LABELLED_BLOCKS:
        sub += f"   Block labels left out (over {MAX_LABELLED_BLOCKS} blocks): see map.html or points.csv"
    fig.text(0.03, 0.925, sub, fontsize=8, parse_math=False)
    cautions = "Cautions: " + " ".join(str(c) for c in plan_cautions(plan))
    fig.text(
        0.03,
        0.095,
        "\n".join(textwrap.wrap(cautions, 190)),
        fontsize=6.5,
        va="top",
        parse_math=False,
        color="#333333",
    )
    return fig


def plan_image_bytes(plan: Any, *, fmt: str = "png") -> bytes:
    """Render the page as PNG or PDF bytes; identical plans give identical bytes."""
    metadata = {"png": {"Software": None}, "pdf": {"CreationDate": None, "Producer": None}}
    if fmt not in metadata:
        from fieldplan.errors import OptionError

        raise OptionError(f"printable page format must be 'png' or 'pdf', got {fmt!r}")
    fig = plan_figure(plan)
    buf = io.BytesIO()
    fig.savefig(buf, format=fmt, dpi=DPI, metadata=metadata[fmt])
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
