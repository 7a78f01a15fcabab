"""Soil cores for composite samples: where each core of a composite is taken.

Two layouts:

* **cell composites** (:func:`disc_cores`): ``n`` cores around a plan point,
  within ``radius`` metres, in a sunflower (Vogel spiral) pattern: core ``k``
  at radius ``R*sqrt((k + 1/2)/n)`` and angle ``k`` times the golden angle, turned
  by a random rotation per composite. Each core then stands for an equal share
  of the disc. Cores that fall outside the allowed area are re-drawn uniformly
  in the disc; the few still outside after that are moved to the nearest
  allowed spot of the disc, so every composite keeps exactly ``n`` cores, all
  within ``R`` of its centre. A plan point in the buffer strip moves (with its
  disc) to the nearest spot well inside the allowed area (:func:`disc_composites`).
* **zone composites** (:func:`zigzag_cores`): ``n`` cores evenly spaced along a
  zig-zag traverse that runs the length of the zone's long axis (from its
  minimum rotated rectangle), so the composite represents the whole zone.

"Allowed area" is the block minus a buffer from its edges (headlands, roads,
old fence lines along the boundary) and from excluded features (manure or
lime heaps, tracks, buildings), see :func:`core_area`.

All functions work in metres in a local metric CRS and are vectorised over
composites with numpy and shapely 2.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import shapely

from fieldplan.errors import DesignError, OptionError

__all__ = [
    "DEFAULT_CORES",
    "CORES_RANGE",
    "DEFAULT_DEPTH_CM",
    "DEFAULT_BUFFER_M",
    "DEFAULT_CORE_RADIUS_M",
    "CELL_HA",
    "core_area",
    "usable_core_area",
    "usable_core_areas",
    "sunflower_offsets",
    "disc_cores",
    "disc_composites",
    "disc_composites_many",
    "DiscComposites",
    "long_axis",
    "zigzag_cores",
]

# Trade defaults (common practice, no source; values from memory).
#: Cores pooled into one composite sample; 15-20 is the usual advice.
DEFAULT_CORES = 16
CORES_RANGE = (15, 20)
#: Routine fertility sampling depth in cm.
DEFAULT_DEPTH_CM = (0, 15)
#: Metres kept from field edges, roads, old fence lines, manure or lime heaps.
DEFAULT_BUFFER_M = 30.0
#: Grid cells of about 1 ha (2.5 acres): a 100 m grid spacing.
CELL_HA = 1.0
#: Radius in metres around a grid point within which a cell composite's cores lie.
DEFAULT_CORE_RADIUS_M = 10.0

GOLDEN_ANGLE = math.pi * (3.0 - math.sqrt(5.0))
_REDRAWS = 32
# Cores moved inside are put this far within the allowed area, so that rounding
# of coordinates in output files cannot put them on or over its edge.
_INSET_M = 0.25
_QUAD_SEGS = 8


def core_area(block, exclusions=None, *, buffer_m: float = DEFAULT_BUFFER_M):
    """The block minus ``buffer_m`` from its edges and from every exclusion.

    Parameters
    ----------
    block : shapely Polygon or MultiPolygon
        In metres.
    exclusions : array-like of shapely geometries, optional
        Features to keep cores away from (heaps, tracks, buildings...).
    buffer_m : float, keyword-only
        Distance in metres.
    """
    if not buffer_m >= 0:
        raise OptionError(f"--core-buffer must be zero or positive metres, got {buffer_m}")
    # GEOS draws round buffer ends as chords inside the true arc; widening the
    # distance by 1/cos(half the chord angle) keeps every spot at least buffer_m away.
    reach = buffer_m / math.cos(math.pi / (4 * _QUAD_SEGS))
    area = shapely.buffer(block, -reach, quad_segs=_QUAD_SEGS) if buffer_m > 0 else block
    if exclusions is not None and len(exclusions):
        near = shapely.buffer(np.asarray(exclusions, dtype=object), reach, quad_segs=_QUAD_SEGS)
        area = shapely.difference(area, shapely.union_all(near))
    return area


def usable_core_area(block, exclusions=None, *, buffer_m: float = DEFAULT_BUFFER_M):
    """:func:`core_area`, halving the buffer until something is left.

    Small blocks cannot keep a full 30 m from every edge. Returns
    ``(area, buffer_used)``; ``buffer_used < buffer_m`` should be reported.
    """
    tries = [buffer_m, buffer_m / 2, buffer_m / 4, buffer_m / 8, 0.0]
    for buf in tries:
        area = core_area(block, exclusions, buffer_m=buf)
        if not shapely.is_empty(area) and shapely.area(area) > 1.0:
            return area, buf
    raise DesignError(
        "the block has no room for soil cores once exclusions are removed; "
        "check the block outline and the exclusion polygons"
    )


def usable_core_areas(blocks, exclusions=None, *, buffer_m: float = DEFAULT_BUFFER_M):
    """:func:`usable_core_area` for many blocks at once.

    Parameters
    ----------
    blocks : array-like of shapely geometries
        In metres.
    exclusions : array-like of shapely geometries, optional
        Features to keep cores away from; each block is cut only by those within
        reach of it.
    buffer_m : float, keyword-only

    Returns
    -------
    areas : ndarray of shapely geometries
    used : ndarray of float
        Buffer used per block (``< buffer_m`` for blocks too small for it).
    failed : int
        Index of the first block with no room at all, or -1.
    """
    if not buffer_m >= 0:
        raise OptionError(f"--core-buffer must be zero or positive metres, got {buffer_m}")
    blocks = np.asarray(blocks, dtype=object)
    size = len(blocks)
    # Exclusions within reach of each block, in their own order (pairs sorted by block, then exclusion).
    near = None
    if exclusions is not None and len(exclusions) and size:
        exclusions = np.asarray(exclusions, dtype=object)
        tree = shapely.STRtree(exclusions)
        pair = tree.query(blocks, predicate="dwithin", distance=1.01 * buffer_m + 1.0)
        order = np.lexsort((pair[1], pair[0]))
        near = (pair[0][order], pair[1][order])
    areas = np.empty(size, dtype=object)
    used = np.full(size, np.nan)
    todo = np.arange(size)
    for buf in (buffer_m, buffer_m / 2, buffer_m / 4, buffer_m / 8, 0.0):
        if len(todo) == 0:
            break
        area = _core_areas(blocks, todo, exclusions, near, buf)
        ok = ~shapely.is_empty(area) & (shapely.area(area) > 1.0)
        areas[todo[ok]] = area[ok]
        used[todo[ok]] = buf
        todo = todo[~ok]
    return areas, used, int(todo[0]) if len(todo) else -1


def _core_areas(blocks, which, exclusions, near, buffer_m: float) -> np.ndarray:
    """:func:`core_area` of ``blocks[which]``, ``near`` pairing blocks with exclusions in reach."""
    reach = buffer_m / math.cos(math.pi / (4 * _QUAD_SEGS))
    area = (
        shapely.buffer(blocks[which], -reach, quad_segs=_QUAD_SEGS) if buffer_m > 0 else blocks[which].copy()
    )
    if near is None:
        return area
    pos = np.full(len(blocks), -1)
    pos[which] = np.arange(len(which))
    keep = pos[near[0]] >= 0
    block, excl = near[0][keep], near[1][keep]
    if len(block) == 0:
        return area
    grown = shapely.buffer(exclusions[np.unique(excl)], reach, quad_segs=_QUAD_SEGS)
    grown = grown[np.searchsorted(np.unique(excl), excl)]
    # One union per block with exclusions in reach, of exactly those exclusions.
    cut, start = np.unique(block, return_index=True)
    unions = np.array([shapely.union_all(part) for part in np.split(grown, start[1:])], dtype=object)
    at = pos[cut]
    area[at] = shapely.difference(area[at], unions)
    return area


def sunflower_offsets(n: int, rotation) -> np.ndarray:
    """Unit-disc offsets ``(m, n, 2)`` of ``n`` cores for each rotation (radians)."""
    if n < 1:
        raise OptionError(f"--cores must be at least 1, got {n}")
    k = np.arange(n)
    r = np.sqrt((k + 0.5) / n)
    theta = k * GOLDEN_ANGLE + np.asarray(rotation, dtype=float).reshape(-1, 1)
    return np.stack([r * np.cos(theta), r * np.sin(theta)], axis=-1)


def _inset(area):
    inner = shapely.buffer(area, -_INSET_M)
    return area if shapely.is_empty(inner) else inner


def _nearest_inside(xy: np.ndarray, area) -> np.ndarray:
    """Move each point to the nearest spot of ``area`` (points already inside stay)."""
    target = _inset(area)
    lines = shapely.shortest_line(shapely.points(xy), target)
    moved = shapely.get_coordinates(lines).reshape(-1, 2, 2)[:, 1, :]
    still = ~shapely.contains_xy(area, moved[:, 0], moved[:, 1])
    if still.any():
        moved[still] = shapely.get_coordinates(shapely.point_on_surface(target))[0]
    return moved


def disc_cores(
    centres: np.ndarray,
    *,
    n: int = DEFAULT_CORES,
    radius: float = DEFAULT_CORE_RADIUS_M,
    area,
    rng: np.random.Generator,
) -> tuple[np.ndarray, np.ndarray]:
    """Cores of cell composites around ``centres``, all inside ``area``.

    Parameters
    ----------
    centres : ndarray, shape (m, 2)
        Composite centres (plan points) in metres.
    n : int, keyword-only
        Cores per composite.
    radius : float, keyword-only
        Metres; cores lie within this distance of their (possibly moved) centre,
        see :func:`disc_composites` for the centres.
    area : shapely geometry, keyword-only
        Allowed area (see :func:`usable_core_area`).
    rng : numpy.random.Generator, keyword-only

    Returns
    -------
    xy : ndarray, shape (m, n, 2)
    moved : ndarray of int, shape (m,)
        Cores per composite that had to be moved to the nearest allowed spot
        of their disc (0 for almost all composites).
    """
    out = disc_composites(centres, n=n, radius=radius, area=area, rng=rng)
    return out.xy, out.moved.sum(axis=1).astype(int)


@dataclass(frozen=True)
class DiscComposites:
    """Cores of cell composites and the centres they surround.

    Attributes
    ----------
    xy : ndarray, shape (m, n, 2)
        Cores, each within ``radius`` of its composite's ``centre``.
    moved : ndarray of bool, shape (m, n)
        Cores moved to the nearest allowed spot of their disc (no random spot was allowed).
    centres : ndarray, shape (m, 2)
        Where the crew goes: the point itself, or, for a point in the buffer strip,
        the nearest spot well inside the allowed area.
    shift_m : ndarray, shape (m,)
        How far each centre moved from the point given (0 for most).
    """

    xy: np.ndarray
    moved: np.ndarray
    centres: np.ndarray
    shift_m: np.ndarray


def disc_composites(
    centres: np.ndarray,
    *,
    n: int = DEFAULT_CORES,
    radius: float = DEFAULT_CORE_RADIUS_M,
    area,
    rng: np.random.Generator,
) -> DiscComposites:
    """Cores of cell composites, each within ``radius`` of its (possibly moved) centre.

    A centre outside ``area`` (in the buffer strip) would leave most of its disc
    outside, so it moves to the nearest spot at least half a radius inside (or
    just inside where the area is too narrow) and its cores go round the new
    centre: the point the crew walks to moves with its cores. A core outside
    ``area`` is re-drawn uniformly in the disc; one still outside after that goes
    to the nearest spot of the disc that is inside ``area``, so no core is ever
    further than ``radius`` from its centre.
    """
    if not radius > 0:
        raise OptionError(f"--core-radius must be positive metres, got {radius}")
    given = np.asarray(centres, dtype=float).reshape(-1, 2)
    if len(given) == 0:
        return DiscComposites(np.empty((0, n, 2)), np.zeros((0, n), bool), given.copy(), np.zeros(0))
    areas = np.array([area], dtype=object)
    return disc_composites_many(given, np.zeros(len(given), dtype=np.int64), areas, [rng], n=n, radius=radius)


def disc_composites_many(
    centres: np.ndarray,
    block_of: np.ndarray,
    areas: np.ndarray,
    rngs,
    *,
    n: int = DEFAULT_CORES,
    radius: float = DEFAULT_CORE_RADIUS_M,
) -> DiscComposites:
    """:func:`disc_composites` for the points of many blocks at once.

    Parameters
    ----------
    centres : ndarray, shape (m, 2)
        Plan points, grouped by block (``block_of`` never decreases).
    block_of : ndarray of int, shape (m,)
        Each point's index into ``areas`` and ``rngs``.
    areas : ndarray of shapely geometries
        Allowed area of each block.
    rngs : sequence of numpy.random.Generator
        Each block's own generator; a block draws from it exactly what
        :func:`disc_composites` on that block alone would draw.
    n, radius : keyword-only
        As for :func:`disc_composites`.
    """
    if not radius > 0:
        raise OptionError(f"--core-radius must be positive metres, got {radius}")
    given = np.asarray(centres, dtype=float).reshape(-1, 2)
    block_of = np.asarray(block_of, dtype=np.int64)
    m = len(given)
    if m == 0:
        return DiscComposites(np.empty((0, n, 2)), np.zeros((0, n), bool), given.copy(), np.zeros(0))
    shapely.prepare(areas)
    blocks, counts = np.unique(block_of, return_counts=True)
    centres = given.copy()
    outside = ~shapely.contains_xy(areas[block_of], centres[:, 0], centres[:, 1])
    if outside.any():
        hit = np.unique(block_of[outside])
        deep = shapely.buffer(areas[hit], -radius / 2)
        inner = np.where(shapely.is_empty(deep), areas[hit], deep)
        centres[outside] = _nearest_inside_each(
            centres[outside], inner, np.searchsorted(hit, block_of[outside])
        )
    rotation = np.concatenate(
        [rngs[b].uniform(0.0, 2.0 * math.pi, size=k) for b, k in zip(blocks, counts, strict=True)]
    )
    xy = centres[:, None, :] + radius * sunflower_offsets(n, rotation)
    flat = xy.reshape(-1, 2)
    core_area_of = areas[np.repeat(block_of, n)]
    bad = np.flatnonzero(~shapely.contains_xy(core_area_of, flat[:, 0], flat[:, 1]))
    for _ in range(_REDRAWS):
        if len(bad) == 0:
            break
        # Each block with cores to re-draw takes its radii, then its angles, from its own generator.
        who, start, k = np.unique(block_of[bad // n], return_index=True, return_counts=True)
        r = np.empty(len(bad))
        theta = np.empty(len(bad))
        for b, i, c in zip(who, start, k, strict=True):
            r[i : i + c] = radius * np.sqrt(rngs[b].random(c))
            theta[i : i + c] = rngs[b].uniform(0.0, 2.0 * math.pi, size=c)
        owner = centres[bad // n]
        flat[bad] = owner + np.column_stack([r * np.cos(theta), r * np.sin(theta)])
        bad = bad[~shapely.contains_xy(core_area_of[bad], flat[bad, 0], flat[bad, 1])]
    moved = np.zeros(m * n, dtype=bool)
    if len(bad):
        owners = np.unique(bad // n)
        # The allowed part of each disc (a little inside it, so the core stays within the radius).
        discs = shapely.buffer(shapely.points(centres[owners]), radius - _INSET_M, quad_segs=_QUAD_SEGS)
        allowed = shapely.intersection(discs, areas[block_of[owners]])
        target = allowed[np.searchsorted(owners, bad // n)]
        flat[bad] = _nearest_in_each(flat[bad], target, centres[bad // n])
        moved[bad] = True
    shift = np.hypot(*(centres - given).T)
    return DiscComposites(flat.reshape(m, n, 2), moved.reshape(m, n), centres, shift)


def _nearest_inside_each(xy: np.ndarray, areas: np.ndarray, which: np.ndarray) -> np.ndarray:
    """:func:`_nearest_inside` of each point ``xy[i]`` in ``areas[which[i]]``."""
    inner = shapely.buffer(areas, -_INSET_M)
    target = np.where(shapely.is_empty(inner), areas, inner)
    lines = shapely.shortest_line(shapely.points(xy), target[which])
    moved = shapely.get_coordinates(lines).reshape(-1, 2, 2)[:, 1, :]
    still = ~shapely.contains_xy(areas[which], moved[:, 0], moved[:, 1])
    if still.any():
        spot = shapely.get_coordinates(shapely.point_on_surface(target[np.unique(which[still])]))
        moved[still] = spot[np.searchsorted(np.unique(which[still]), which[still])]
    return moved


def _nearest_in_each(xy: np.ndarray, targets: np.ndarray, fallback: np.ndarray) -> np.ndarray:
    """Nearest spot of ``targets[i]`` to ``xy[i]`` (inset a little); ``fallback[i]`` if it is empty."""
    inner = shapely.buffer(targets, -_INSET_M)
    use = np.where(shapely.is_empty(inner), targets, inner)
    out = fallback.astype(float).copy()
    ok = ~shapely.is_empty(use)
    if ok.any():
        lines = shapely.shortest_line(shapely.points(xy[ok]), use[ok])
        out[ok] = shapely.get_coordinates(lines).reshape(-1, 2, 2)[:, 1, :]
    return out


def long_axis(geom) -> tuple[np.ndarray, np.ndarray, float, float]:
    """Centre, unit direction, length and width of ``geom``'s minimum rotated rectangle."""
    rect = shapely.oriented_envelope(geom)
    coords = shapely.get_coordinates(rect)
    if len(coords) < 5:
        raise DesignError("the zone has no area: a zig-zag traverse needs a polygon")
    e1, e2 = coords[1] - coords[0], coords[2] - coords[1]
    l1, l2 = float(np.hypot(*e1)), float(np.hypot(*e2))
    u, length, width = (e1 / l1, l1, l2) if l1 >= l2 else (e2 / l2, l2, l1)
    # A fixed sign keeps the traverse independent of GEOS's vertex order.
    if u[0] < 0 or (u[0] == 0 and u[1] < 0):
        u = -u
    return coords[:4].mean(axis=0), u, length, width


def _longest_pieces(cuts) -> tuple[np.ndarray, np.ndarray]:
    """For each cut geometry, the end points of its longest line piece (NaN if empty)."""
    parts, owner = shapely.get_parts(cuts, return_index=True)
    ends = np.full((len(cuts), 2, 2), np.nan)
    # LineString pieces only: a cut that merely touches the area gives a point.
    keep = (shapely.get_type_id(parts) == 1) & ~shapely.is_empty(parts)
    parts, owner = parts[keep], owner[keep]
    if len(parts) == 0:
        return ends[:, 0], ends[:, 1]
    length = shapely.length(parts)
    order = np.lexsort((-length, owner))
    first = order[np.r_[True, owner[order][1:] != owner[order][:-1]]]
    a = shapely.get_coordinates(shapely.get_point(parts[first], 0))
    b = shapely.get_coordinates(shapely.get_point(parts[first], -1))
    ends[owner[first], 0] = a
    ends[owner[first], 1] = b
    return ends[:, 0], ends[:, 1]


def zigzag_cores(
    zone,
    *,
    n: int = DEFAULT_CORES,
    rng: np.random.Generator,
    area=None,
    legs: int | None = None,
) -> np.ndarray:
    """Cores of a zone composite: ``n`` points along a zig-zag over the zone's long axis.

    The traverse has ``legs`` straight legs (default about one per four cores)
    between stations spread from 2 % to 98 % of the allowed area's extent along
    the long axis. At each station
    the vertex lies at 20 % or 80 % (alternating, with a little random jitter)
    across the longest cross-section of the allowed area there. Cores are spaced
    evenly along the part of the traverse inside the allowed area, from a
    random start (systematic sampling along the line).

    Parameters
    ----------
    zone : shapely Polygon or MultiPolygon
        The zone (block) in metres; fixes the long axis.
    n : int, keyword-only
        Cores in the composite.
    rng : numpy.random.Generator, keyword-only
    area : shapely geometry, optional, keyword-only
        Allowed area; defaults to ``zone``.
    legs : int, optional, keyword-only

    Returns
    -------
    ndarray, shape (n, 2)
    """
    if n < 1:
        raise OptionError(f"--cores must be at least 1, got {n}")
    area = zone if area is None else area
    if shapely.is_empty(area) or shapely.area(area) <= 0:
        raise DesignError("the zone has no allowed area left for cores")
    shapely.prepare(area)
    centre, u, length, width = long_axis(zone)
    v = np.array([-u[1], u[0]])
    legs = max(2, min(max(n - 1, 1), round(n / 4))) if legs is None else int(legs)
    # Stations span the allowed area's own extent along the axis: buffers may
    # cut the ends of the zone, and a station there would find nothing.
    along = (shapely.get_coordinates(area) - centre) @ u
    s = along.min() + (along.max() - along.min()) * np.linspace(0.02, 0.98, legs + 1)
    half = width + length  # long enough to cross the zone whatever its shape
    a = centre + s[:, None] * u - half * v
    b = centre + s[:, None] * u + half * v
    cuts = shapely.intersection(shapely.linestrings(np.stack([a, b], axis=1)), area)
    lo, hi = _longest_pieces(cuts)
    ok = ~np.isnan(lo[:, 0])
    if ok.sum() < 2:
        xy, _ = disc_cores(
            shapely.get_coordinates(shapely.point_on_surface(area)),
            n=n,
            radius=max(math.sqrt(shapely.area(area) / math.pi), 1.0),
            area=area,
            rng=rng,
        )
        return xy[0]
    lo, hi = lo[ok], hi[ok]
    # Order the two ends of each cross-section by the side they lie on, so the
    # zig-zag alternates between the same two sides of the zone.
    swap = ((hi - lo) @ v) < 0
    lo[swap], hi[swap] = hi[swap].copy(), lo[swap].copy()
    first = int(rng.integers(2))
    frac = np.where((np.arange(len(lo)) + first) % 2 == 0, 0.2, 0.8)
    frac = frac + rng.uniform(-0.05, 0.05, size=len(frac))
    vertices = lo + frac[:, None] * (hi - lo)
    inside = shapely.intersection(shapely.linestrings(vertices), area)
    pieces = shapely.get_parts(inside)
    pieces = pieces[(shapely.get_type_id(pieces) == 1) & ~shapely.is_empty(pieces)]
    if len(pieces) == 0:
        return _nearest_inside(vertices[np.linspace(0, len(vertices) - 1, n).round().astype(int)], area)
    # Walk the pieces in traverse order; GEOS does not promise it.
    traverse = shapely.linestrings(vertices)
    pieces = pieces[np.argsort(shapely.line_locate_point(traverse, shapely.get_point(pieces, 0)))]
    lengths = shapely.length(pieces)
    total = float(lengths.sum())
    at = (rng.random() + np.arange(n)) * total / n
    piece = np.searchsorted(np.cumsum(lengths), at, side="right").clip(0, len(pieces) - 1)
    local = at - np.r_[0.0, np.cumsum(lengths)][piece]
    xy = shapely.get_coordinates(shapely.line_interpolate_point(pieces[piece], local))
    bad = ~shapely.contains_xy(area, xy[:, 0], xy[:, 1])
    if bad.any():
        # Points exactly on the edge of the allowed area (a piece's end point).
        xy[bad] = _nearest_inside(xy[bad], area)
    return xy
