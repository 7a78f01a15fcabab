"""Random plants from a row model, drawn without listing the plants.

Row model
---------
Rows run along ``row_bearing_deg`` (clockwise from north), ``row_spacing_m``
apart. The first row lies half a row spacing inside the block's left-hand edge
when facing along the bearing (for a bearing of 0, the western edge), and rows
are numbered 1, 2, ... from that side; a row number counts every row line of
the model, so a row that misses part of the block keeps its number. Each row
line is clipped to the block; the pieces inside are *row segments*. A row
starts at the end it would reach first when travelling along the bearing.

Plants on a segment of length ``L`` sit ``plant_spacing_m`` apart:
``c = floor(L / plant_spacing_m)`` plants centred on the segment, the first at
``(L - c * plant_spacing_m) / 2 + plant_spacing_m / 2`` from its start. Plant
numbers count along the row from its start, over all its segments, starting
at 1.

A multi-part block (a MultiPolygon, e.g. a block split by a road or a creek)
has a row model per part: each part's rows start half a row spacing inside
its own left-hand edge and are numbered 1, 2, ... within the part, so a crew
counts them from the part it stands in (:attr:`RowSegments.part`).

Mapped rows (:func:`rows_from_lines`) replace the model: each given line is a
row, numbered in the order given, starting at its first vertex.

Drawing
-------
``skip_row_ends`` excludes that many plants at each end of every segment (end
effects at headlands and gaps); ``skip_border_rows`` excludes that many rows on
each side of the block (the first and last rows that hold plants). Eligible
plants are ranked segment by segment; ``n`` distinct ranks are drawn at random
and mapped back to (segment, plant) with :func:`numpy.searchsorted` on the
cumulative counts. Memory and time are O(rows + n), never O(plants).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
import shapely
from numpy.typing import ArrayLike
from shapely.geometry.base import BaseGeometry

from fieldplan.errors import DesignError, OptionError
from tests.reference_rows.scanline import LEN_TOL as _LEN_TOL
from tests.reference_rows.scanline import (
    clip_pieces,
    first_distinct,
    locate_ranks,
    row_model,
    segment_ends,
    straight_points,
)

__all__ = [
    "PlantPicks",
    "RowSegments",
    "cluster_count",
    "cluster_sizes",
    "concat_segments",
    "eligible_plants",
    "pick_plants",
    "row_segments",
    "rows_from_lines",
    "sample_ranks",
]


@dataclass(frozen=True)
class RowSegments:
    """Pieces of rows inside a block, ordered by row then along the row.

    Attributes
    ----------
    row : numpy.ndarray
        1-based row number of each segment.
    length : numpy.ndarray
        Segment length in metres.
    plants : numpy.ndarray
        Plants on the segment.
    first_plant : numpy.ndarray
        Plant number (1-based along the row) of the segment's first plant.
    offset : numpy.ndarray
        Distance from the segment start to its first plant, metres.
    plant_spacing : float or numpy.ndarray
        Distance between plants along a row, metres (one value, or one per
        segment after :func:`concat_segments`).
    lines : numpy.ndarray, optional
        LineString of each segment, oriented from the row's start (mapped rows).
    ends : numpy.ndarray, optional
        ``(k, 2, 2)`` start and end coordinates of straight segments (row model);
        their LineStrings are built only when :attr:`geometry` is asked for.
    part : numpy.ndarray, optional
        1-based part of a multi-part block each segment lies in; rows and plants
        are numbered within their part. None means one part.
    """

    row: np.ndarray
    length: np.ndarray
    plants: np.ndarray
    first_plant: np.ndarray
    offset: np.ndarray
    plant_spacing: float | np.ndarray
    lines: np.ndarray | None = None
    ends: np.ndarray | None = None
    part: np.ndarray | None = None

    @property
    def parts(self) -> np.ndarray:
        """:attr:`part`, with 1 for every segment of a one-part block."""
        return self.part if self.part is not None else np.ones(self.row.size, dtype=np.int64)

    @cached_property
    def geometry(self) -> np.ndarray:
        """LineString of each segment, oriented from the row's start."""
        return self.lines_at(slice(None))

    def lines_at(self, index) -> np.ndarray:
        """LineStrings of the segments at ``index`` (built from :attr:`ends` if needed)."""
        if self.lines is not None:
            return self.lines[index]
        ends = self.ends[index]
        return shapely.linestrings(ends) if ends.size else np.empty(0, dtype=object)

    @property
    def total_plants(self) -> int:
        """Number of plants in the model."""
        return int(self.plants.sum())


@dataclass(frozen=True)
class PlantPicks:
    """Plants drawn by :func:`pick_plants`, in draw order.

    Attributes
    ----------
    row, plant : numpy.ndarray
        1-based row number and plant number along that row.
    x, y : numpy.ndarray
        Plant coordinates (the block's metric CRS).
    segment : numpy.ndarray
        Index of the row segment in the :class:`RowSegments`.
    eligible : int
        Number of plants that could have been drawn.
    part : numpy.ndarray
        1-based part of the block (multi-part blocks number rows per part).
    """

    row: np.ndarray
    plant: np.ndarray
    x: np.ndarray
    y: np.ndarray
    segment: np.ndarray
    eligible: int
    part: np.ndarray | None = None


def _check_positive(value: float, name: str) -> float:
    if not np.isfinite(value) or value <= 0:
        raise OptionError(f"{name} must be a positive number of metres, got {value}")
    return float(value)


def _segments(row_lines: np.ndarray, clip: BaseGeometry | None, plant_spacing: float) -> RowSegments:
    """Clip row lines, orient and order the pieces, count plants."""
    pieces = row_lines if clip is None else shapely.intersection(row_lines, clip)
    pieces = shapely.line_merge(pieces)
    parts, which = shapely.get_parts(pieces, return_index=True)
    keep = (shapely.get_type_id(parts) == 1) & (shapely.length(parts) > _LEN_TOL)
    parts, which = parts[keep], which[keep]
    start = shapely.get_point(parts, 0)
    end = shapely.get_point(parts, -1)
    host = row_lines[which]
    at_start = shapely.line_locate_point(host, start)
    at_end = shapely.line_locate_point(host, end)
    flip = at_end < at_start
    parts = np.where(flip, shapely.reverse(parts), parts)
    along = np.minimum(at_start, at_end)
    order = np.lexsort((along, which))
    parts, which = parts[order], which[order]
    length = shapely.length(parts)
    plants = np.floor(length / plant_spacing + 1e-9).astype(np.int64)
    offset = (length - plants * plant_spacing) / 2.0 + plant_spacing / 2.0
    # Plants of earlier segments of the same row, for numbering along the row.
    before = np.cumsum(plants) - plants
    if which.size:
        _, first_of_row = np.unique(which, return_index=True)
        row_base = np.repeat(before[first_of_row], np.diff(np.append(first_of_row, which.size)))
    else:
        row_base = np.zeros(0, dtype=np.int64)
    return RowSegments(
        row=which.astype(np.int64) + 1,
        lines=parts,
        length=length,
        plants=plants,
        first_plant=before - row_base + 1,
        offset=offset,
        plant_spacing=plant_spacing,
    )


def _frame(theta: float) -> tuple[np.ndarray, np.ndarray]:
    u = np.array([np.sin(theta), np.cos(theta)])  # along the rows
    v = np.array([np.cos(theta), -np.sin(theta)])  # across, to the right of u
    return u, v


def _ring_coordinates(polygon: BaseGeometry) -> tuple[np.ndarray, np.ndarray]:
    """Ring vertices of a polygon or multipolygon, and the ring index of each."""
    # Attribute access is several times cheaper than get_parts + get_rings for one geometry.
    parts = polygon.geoms if shapely.get_type_id(polygon) == 6 else (polygon,)
    rings = []
    for part in parts:
        rings.append(part.exterior)
        rings.extend(part.interiors)
    return shapely.get_coordinates(rings, return_index=True)


def row_segments(
    polygon: BaseGeometry,
    *,
    row_spacing_m: float,
    plant_spacing_m: float,
    row_bearing_deg: float,
    clip: BaseGeometry | None = None,
) -> RowSegments:
    """Row segments of the spacing model for a block.

    Rows are cut by an even-odd scanline over the polygon's ring edges in the
    row frame (no per-row geometry operations), so the cost is O(vertices +
    rows + crossings).

    Parameters
    ----------
    polygon : shapely Polygon or MultiPolygon
        The block, in a metric CRS; rows are laid out and numbered over it.
    row_spacing_m, plant_spacing_m : float
        Distance between rows and between plants along a row.
    row_bearing_deg : float
        Direction rows run, degrees clockwise from north.
    clip : shapely geometry, optional
        Part of the block to keep plants in (e.g. the block minus a headland
        and exclusions); row and plant numbers stay those of the whole block.
    """
    rs = _check_positive(row_spacing_m, "row spacing")
    ps = _check_positive(plant_spacing_m, "plant spacing")
    if not np.isfinite(row_bearing_deg):
        raise OptionError("row bearing is unknown; give the block a row bearing in degrees")
    if polygon is None or polygon.is_empty:
        raise DesignError("the block has no geometry to lay rows in")
    if shapely.get_type_id(polygon) not in (3, 6):
        raise DesignError("the block is not a polygon; rows are laid out in polygons only")
    if shapely.get_type_id(polygon) == 6 and shapely.get_num_geometries(polygon) > 1:
        # A crew counts rows from the edge of the part it stands in: each part of a
        # multi-part block has its own rows 1, 2, ... (in the parts' order in the file).
        pieces = [_one_part_segments(part, rs, ps, float(row_bearing_deg), clip) for part in polygon.geoms]
        return _join_parts(pieces)
    return _one_part_segments(polygon, rs, ps, float(row_bearing_deg), clip)


def _join_parts(pieces: list[RowSegments]) -> RowSegments:
    """The segments of a block's parts one after the other, each tagged with its part."""
    part = np.concatenate([np.full(p.row.size, i + 1, dtype=np.int64) for i, p in enumerate(pieces)])
    straight = all(p.lines is None for p in pieces)
    return RowSegments(
        row=np.concatenate([p.row for p in pieces]),
        lines=None if straight else np.concatenate([p.geometry for p in pieces]),
        ends=np.concatenate([p.ends for p in pieces]) if straight else None,
        length=np.concatenate([p.length for p in pieces]),
        plants=np.concatenate([p.plants for p in pieces]),
        first_plant=np.concatenate([p.first_plant for p in pieces]),
        offset=np.concatenate([p.offset for p in pieces]),
        plant_spacing=pieces[0].plant_spacing,
        part=part,
    )


def _one_part_segments(polygon, rs: float, ps: float, row_bearing_deg: float, clip) -> RowSegments:
    """:func:`row_segments` of a polygon (or a one-part multipolygon)."""
    u, v = _frame(np.radians(float(row_bearing_deg)))
    xy, ring = _ring_coordinates(polygon)
    row, start, length, plants, first_plant, offset, ends, first, count = row_model(xy, ring, u, v, rs, ps)
    full = RowSegments(
        row=row + 1,
        ends=ends,
        length=length,
        plants=plants,
        first_plant=first_plant,
        offset=offset,
        plant_spacing=ps,
    )
    if clip is None or clip is polygon:
        return full
    # Number plants over the whole block, then keep those inside ``clip``.
    if clip.is_empty or shapely.get_type_id(clip) not in (3, 6):
        return _clip_segments(full, clip)
    cxy, cring = _ring_coordinates(clip)
    crow, cstart, cend = clip_pieces(cxy, cring, u, v, first, rs, count)
    return _clip_intervals(full, start, (crow + 1, cstart, cend), (first, rs), u, v)


def _clip_intervals(
    full: RowSegments,
    start: np.ndarray,
    clip: tuple[np.ndarray, np.ndarray, np.ndarray],
    rows: tuple[float, float],
    u: np.ndarray,
    v: np.ndarray,
) -> RowSegments:
    """:func:`_clip_segments` for a polygonal clip, on ``u`` intervals of the same rows.

    ``rows`` is the first row's offset and the row spacing.
    """
    ps = float(full.plant_spacing)
    crow, cstart, cend = clip
    # Pair every full segment with every clip piece of its row (both sorted by row).
    lo_i = np.searchsorted(crow, full.row, side="left")
    hi_i = np.searchsorted(crow, full.row, side="right")
    count = hi_i - lo_i
    parent = np.repeat(np.arange(full.row.size), count)
    piece = np.arange(parent.size) - np.repeat(np.cumsum(count) - count, count) + lo_i[parent]
    a0 = start[parent]
    lo_u = np.maximum(a0, cstart[piece])
    hi_u = np.minimum(a0 + full.length[parent], cend[piece])
    keep = hi_u - lo_u > _LEN_TOL
    parent, lo_u, hi_u, a0 = parent[keep], lo_u[keep], hi_u[keep], a0[keep]
    lo, hi = lo_u - a0, hi_u - a0
    off = full.offset[parent]
    # Plant k of the parent sits at off + k * ps; keep those with lo <= position <= hi.
    k0 = np.maximum(np.ceil((lo - off) / ps - 1e-9), 0).astype(np.int64)
    k1 = np.minimum(np.floor((hi - off) / ps + 1e-9), full.plants[parent] - 1).astype(np.int64)
    row = full.row[parent]
    return RowSegments(
        row=row,
        ends=segment_ends(rows[0] + (row - 1) * rows[1], lo_u, hi_u, u, v),
        length=hi_u - lo_u,
        plants=np.maximum(k1 - k0 + 1, 0),
        first_plant=full.first_plant[parent] + k0,
        offset=off + k0 * ps - lo,
        plant_spacing=ps,
    )


def _clip_segments(full: RowSegments, clip: BaseGeometry) -> RowSegments:
    """Keep the parts of ``full``'s segments inside ``clip``, numbered as in ``full``.

    Plants keep the positions and numbers of the unclipped model; a clipped
    piece holds the plants of its parent segment that fall inside it.
    """
    ps = float(full.plant_spacing)
    pieces = shapely.line_merge(shapely.intersection(full.geometry, clip))
    parts, parent = shapely.get_parts(pieces, return_index=True)
    keep = (shapely.get_type_id(parts) == 1) & (shapely.length(parts) > _LEN_TOL)
    parts, parent = parts[keep], parent[keep]
    host = full.geometry[parent]
    a = shapely.line_locate_point(host, shapely.get_point(parts, 0))
    b = shapely.line_locate_point(host, shapely.get_point(parts, -1))
    flip = b < a
    parts = np.where(flip, shapely.reverse(parts), parts)
    lo, hi = np.minimum(a, b), np.maximum(a, b)
    off = full.offset[parent]
    # Plant k of the parent sits at off + k * ps; keep those with lo <= position <= hi.
    k0 = np.maximum(np.ceil((lo - off) / ps - 1e-9), 0).astype(np.int64)
    k1 = np.minimum(np.floor((hi - off) / ps + 1e-9), full.plants[parent] - 1).astype(np.int64)
    plants = np.maximum(k1 - k0 + 1, 0)
    order = np.lexsort((lo, parent))
    return RowSegments(
        row=full.row[parent][order],
        lines=parts[order],
        length=shapely.length(parts)[order],
        plants=plants[order],
        first_plant=(full.first_plant[parent] + k0)[order],
        offset=(off + k0 * ps - lo)[order],
        plant_spacing=ps,
    )


def concat_segments(parts: list[RowSegments]) -> tuple[RowSegments, np.ndarray]:
    """Join the row segments of several blocks into one frame to draw from.

    Returns the joined segments (per-segment plant spacing) and, for each
    segment, the index of the part it came from.
    """
    if not parts:
        raise DesignError("no row segments to draw from")
    sizes = [p.row.size for p in parts]

    def cat(name: str) -> np.ndarray:
        return np.concatenate([np.asarray(getattr(p, name)) for p in parts])

    spacing = np.concatenate(
        [np.broadcast_to(np.asarray(p.plant_spacing, dtype=float), p.row.shape) for p in parts]
    )
    straight = all(p.lines is None for p in parts)
    joined = RowSegments(
        row=cat("row"),
        lines=None if straight else np.concatenate([p.geometry for p in parts]),
        ends=np.concatenate([p.ends for p in parts]) if straight else None,
        length=cat("length"),
        plants=cat("plants"),
        first_plant=cat("first_plant"),
        offset=cat("offset"),
        plant_spacing=spacing,
        part=np.concatenate([p.parts for p in parts]) if any(p.part is not None for p in parts) else None,
    )
    return joined, np.repeat(np.arange(len(parts)), sizes)


def rows_from_lines(
    lines: ArrayLike,
    *,
    plant_spacing_m: float,
    polygon: BaseGeometry | None = None,
) -> RowSegments:
    """Row segments from mapped row lines instead of the spacing model.

    Parameters
    ----------
    lines : array_like of LineString
        One line per row, in row order, each drawn from the row's start.
    plant_spacing_m : float
        Distance between plants along a row.
    polygon : shapely geometry, optional
        Block to clip the rows to.
    """
    ps = _check_positive(plant_spacing_m, "plant spacing")
    arr = np.asarray(lines, dtype=object)
    if arr.ndim != 1 or arr.size == 0:
        raise DesignError("the rows file holds no row lines")
    types = shapely.get_type_id(arr)
    bad = np.flatnonzero(types != 1)
    if bad.size:
        raise DesignError(
            f"row {int(bad[0]) + 1} in the rows file is not a LineString; give one line per row"
        )
    return _segments(arr, polygon, ps)


def eligible_plants(
    segments: RowSegments, *, skip_row_ends: int = 0, skip_border_rows: int = 0
) -> np.ndarray:
    """Plants per segment that may be drawn after the end and border exclusions."""
    if skip_row_ends < 0 or skip_border_rows < 0:
        raise OptionError("plants or rows to skip must be zero or more")
    count = np.maximum(segments.plants - 2 * int(skip_row_ends), 0)
    if skip_border_rows:
        # Rows are numbered per block (per part of a multi-part block, each with its own
        # border rows); after concat_segments, border rows are taken over the joined
        # numbering, so skip border rows block by block before joining.
        key = segments.parts * (int(segments.row.max(initial=0)) + 1) + segments.row
        planted = np.unique(key[segments.plants > 0])
        owner = planted // (int(segments.row.max(initial=0)) + 1)
        starts = np.searchsorted(owner, owner, side="left")
        ends = np.searchsorted(owner, owner, side="right")
        rank = np.arange(planted.size) - starts
        k = int(skip_border_rows)
        border = planted[(rank < k) | (rank >= ends - starts - k)]
        count = np.where(np.isin(key, border), 0, count)
    return count


def sample_ranks(total: int, n: int, *, rng: np.random.Generator) -> np.ndarray:
    """Draw ``n`` distinct integers from ``range(total)`` uniformly, in draw order.

    Uses O(n) memory: batches of draws with replacement, keeping the first
    occurrence of each value (equivalent to sequential sampling without
    replacement). When ``n`` is at least half of ``total`` a permutation is
    cheaper and still O(n).
    """
    total, n = int(total), int(n)
    if n < 0 or n > total:
        raise DesignError(f"cannot draw {n} distinct plants from {total}")
    if 2 * n >= total:
        return rng.permutation(total)[:n]
    out = np.empty(0, dtype=np.int64)
    while out.size < n:
        need = n - out.size
        draw = rng.integers(0, total, size=need + need // 8 + 8, dtype=np.int64)
        out = first_distinct(np.concatenate([out, draw]), n)
    return out


def pick_plants(
    segments: RowSegments,
    n: int,
    *,
    rng: np.random.Generator,
    skip_row_ends: int = 0,
    skip_border_rows: int = 0,
    eligible: np.ndarray | None = None,
) -> PlantPicks:
    """Draw ``n`` distinct plants uniformly from the eligible plants.

    Parameters
    ----------
    segments : RowSegments
        From :func:`row_segments` or :func:`rows_from_lines`.
    n : int
        Plants to draw.
    rng : numpy.random.Generator
        Source of randomness.
    skip_row_ends : int
        Plants excluded at each end of every row segment.
    skip_border_rows : int
        Rows excluded on each side of the block.
    eligible : numpy.ndarray, optional
        Eligible plants per segment, precomputed with :func:`eligible_plants`
        (block by block, before :func:`concat_segments`); overrides
        ``skip_border_rows``. ``skip_row_ends`` must match the value used.

    Returns
    -------
    PlantPicks
        In draw order, so a prefix is itself a random sample.
    """
    if eligible is None:
        eligible = eligible_plants(segments, skip_row_ends=skip_row_ends, skip_border_rows=skip_border_rows)
    total = int(eligible.sum())
    if n > total:
        raise DesignError(
            f"{n} plants requested but only {total} are eligible after skipping "
            f"{skip_row_ends} plant(s) at row ends and {skip_border_rows} border row(s); "
            "lower the number or the skips"
        )
    ranks = sample_ranks(total, n, rng=rng)
    seg, within = locate_ranks(np.asarray(eligible, dtype=np.int64), ranks, int(skip_row_ends))
    spacing = np.asarray(segments.plant_spacing, dtype=float)
    dist = segments.offset[seg] + within * (spacing if spacing.ndim == 0 else spacing[seg])
    if segments.ends is not None:
        # Straight segments: the plant is a linear interpolation of the ends.
        xy = straight_points(seg, dist, segments.ends, segments.length)
    else:
        xy = shapely.get_coordinates(shapely.line_interpolate_point(segments.lines_at(seg), dist)).reshape(
            -1, 2
        )
    return PlantPicks(
        row=segments.row[seg],
        plant=segments.first_plant[seg] + within,
        x=xy[:, 0],
        y=xy[:, 1],
        segment=seg,
        eligible=total,
        part=segments.parts[seg],
    )


def cluster_count(target_units: int, units_per_cluster: int) -> int:
    """Clusters needed to collect ``target_units``: ``ceil(target / size)``."""
    t, m = int(target_units), int(units_per_cluster)
    if t < 1 or m < 1 or t != target_units or m != units_per_cluster:
        raise OptionError(
            "target units and units per cluster must be whole numbers of 1 or more, "
            f"got {target_units} and {units_per_cluster}"
        )
    return -(-t // m)


def cluster_sizes(target_units: int, units_per_cluster: int) -> np.ndarray:
    """Units to take in each cluster; the last takes the remainder so the total is exact.

    Examples
    --------
    >>> cluster_sizes(10, 4).tolist()
    [4, 4, 2]
    """
    k = cluster_count(target_units, units_per_cluster)
    sizes = np.full(k, int(units_per_cluster), dtype=np.int64)
    sizes[-1] = int(target_units) - (k - 1) * int(units_per_cluster)
    return sizes
