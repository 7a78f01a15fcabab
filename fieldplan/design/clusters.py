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

from dataclasses import dataclass, replace
from functools import cached_property

import numpy as np
import shapely
from numpy.typing import ArrayLike
from shapely.geometry.base import BaseGeometry

from fieldplan.design.scanline import (
    LEN_TOL,
    first_distinct,
    frame_coordinates,
    group_starts,
    locate_ranks,
    plant_layout,
    row_frames,
    row_pieces,
    row_span,
    segment_ends,
    straight_points,
)
from fieldplan.errors import DesignError, OptionError

__all__ = [
    "PlantPicks",
    "RowSegments",
    "StraightPieces",
    "block_row_segments",
    "block_rows_from_lines",
    "cluster_count",
    "cluster_sizes",
    "concat_segments",
    "eligible_plants",
    "pick_plants",
    "pick_plants_many",
    "row_segments",
    "rows_from_lines",
    "sample_ranks",
    "sample_ranks_many",
]


@dataclass(frozen=True)
class StraightPieces:
    """Straight row segments in their row frame; end points are computed on demand.

    Attributes
    ----------
    across : numpy.ndarray
        Offset ``v`` of each segment's row line.
    start, end : numpy.ndarray
        Range ``u`` along the row of each segment.
    unit : numpy.ndarray
        Row frame of each segment (index into ``u`` and ``v``).
    u, v : numpy.ndarray
        ``(k, 2)`` unit vectors along and across the rows of each frame.
    """

    across: np.ndarray
    start: np.ndarray
    end: np.ndarray
    unit: np.ndarray
    u: np.ndarray
    v: np.ndarray

    def ends_at(self, index) -> np.ndarray:
        """``(k, 2, 2)`` end points of the segments at ``index`` (element by element as for all)."""
        unit = self.unit[index]
        return segment_ends(
            self.across[index], self.start[index], self.end[index], self.u[unit], self.v[unit]
        )

    def take(self, index) -> StraightPieces:
        """The segments at ``index`` (a mask or indices)."""
        return replace(
            self,
            across=self.across[index],
            start=self.start[index],
            end=self.end[index],
            unit=self.unit[index],
        )


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
        ``(k, 2, 2)`` start and end coordinates of straight segments; their
        LineStrings are built only when :attr:`geometry` is asked for.
    part : numpy.ndarray, optional
        1-based part of a multi-part block each segment lies in; rows and plants
        are numbered within their part. None means one part.
    pieces : StraightPieces, optional
        Straight segments held in their row frame (the row model), instead of
        ``ends``: end points are computed only for the segments asked for
        (:meth:`ends_at`), e.g. those a plant was drawn from.
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
    pieces: StraightPieces | None = None

    @property
    def parts(self) -> np.ndarray:
        """:attr:`part`, with 1 for every segment of a one-part block."""
        return self.part if self.part is not None else np.ones(self.row.size, dtype=np.int64)

    @cached_property
    def geometry(self) -> np.ndarray:
        """LineString of each segment, oriented from the row's start."""
        return self.lines_at(slice(None))

    def lines_at(self, index) -> np.ndarray:
        """LineStrings of the segments at ``index`` (built from their end points if needed)."""
        if self.lines is not None:
            return self.lines[index]
        ends = self.ends_at(index)
        return shapely.linestrings(ends) if ends.size else np.empty(0, dtype=object)

    def ends_at(self, index) -> np.ndarray:
        """``(k, 2, 2)`` start and end points of the straight segments at ``index``."""
        if self.ends is not None:
            return self.ends[index]
        if self.pieces is not None:
            return self.pieces.ends_at(index)
        raise DesignError("mapped rows have no straight ends; use lines_at")

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


def _check_all_positive(values: np.ndarray, name: str) -> None:
    bad = np.flatnonzero(~(np.isfinite(values) & (values > 0)))
    if bad.size:
        _check_positive(float(values[bad[0]]), name)


def _object_array(values) -> np.ndarray:
    """A 1-d object array of geometries (or None), without numpy looking inside them."""
    if isinstance(values, np.ndarray) and values.dtype == object and values.ndim == 1:
        return values
    seq = list(values) if not isinstance(values, BaseGeometry) and values is not None else [values]
    out = np.empty(len(seq), dtype=object)
    out[:] = seq
    return out


def _ranges(start: np.ndarray, count: np.ndarray) -> np.ndarray:
    """``concatenate([arange(s, s + c) for s, c in zip(start, count)])`` without the loop."""
    total = int(count.sum())
    return np.arange(total) - np.repeat(np.cumsum(count) - count - start, count)


def _polygons(geoms: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Polygonal parts of each geometry (collections opened) and the index of their geometry."""
    parts, index = shapely.get_parts(geoms, return_index=True)
    types = shapely.get_type_id(parts)
    nested = np.isin(types, (6, 7))
    if nested.any():
        # A geometry collection (e.g. left by a difference) may hold multipolygons: open them too.
        inner, at = _polygons(parts[nested])
        parts = np.concatenate([parts[~nested], inner])
        index = np.concatenate([index[~nested], index[nested][at]])
        order = np.argsort(index, kind="stable")
        parts, index = parts[order], index[order]
        types = shapely.get_type_id(parts)
    keep = (types == 3) & ~shapely.is_empty(parts)
    return parts[keep], index[keep]


def _ring_vertices(polygons: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Ring vertices of polygons (exterior, then holes), their ring, and the polygon of each ring."""
    rings, owner = shapely.get_rings(polygons, return_index=True)
    xy, ring = shapely.get_coordinates(rings, return_index=True)
    return xy, ring, owner


def block_row_segments(
    geoms,
    *,
    row_spacing_m,
    plant_spacing_m,
    row_bearing_deg,
    clips=None,
) -> tuple[RowSegments, np.ndarray]:
    """Row segments of the spacing model for many blocks at once.

    The same model as :func:`row_segments`, block by block (each part of a
    multi-part block with its own rows), computed for all blocks and parts in
    one pass of array calls.

    Parameters
    ----------
    geoms : array_like of shapely Polygon or MultiPolygon
        The blocks, in a metric CRS.
    row_spacing_m, plant_spacing_m, row_bearing_deg : array_like
        Per block (or one value for all).
    clips : array_like of geometry or None, optional
        Per block, the part to keep plants in (None, or the block's own
        geometry object, keeps the whole block); row and plant numbers stay
        those of the whole block. Polygonal parts of a collection are used.

    Returns
    -------
    segments : RowSegments
        Segments of all blocks, block by block in input order; per-segment
        plant spacing and :attr:`RowSegments.part` (1 for one-part blocks).
    block : numpy.ndarray
        Index of each segment's block in ``geoms``.
    """
    geoms = _object_array(geoms)
    nb = geoms.size
    rs = np.broadcast_to(np.asarray(row_spacing_m, dtype=float), (nb,))
    ps = np.broadcast_to(np.asarray(plant_spacing_m, dtype=float), (nb,))
    bearing = np.broadcast_to(np.asarray(row_bearing_deg, dtype=float), (nb,))
    _check_all_positive(rs, "row spacing")
    _check_all_positive(ps, "plant spacing")
    if not np.isfinite(bearing).all():
        raise OptionError("row bearing is unknown; give the block a row bearing in degrees")
    if nb and (shapely.is_missing(geoms) | shapely.is_empty(geoms)).any():
        raise DesignError("the block has no geometry to lay rows in")
    types = shapely.get_type_id(geoms)
    if not np.isin(types, (3, 6)).all():
        raise DesignError("the block is not a polygon; rows are laid out in polygons only")

    # Units: one per part of each block, each with its own rows numbered from its own edge.
    parts, pblock = shapely.get_parts(geoms, return_index=True)
    n_parts = np.bincount(pblock, minlength=nb)
    unit_of_block = np.cumsum(n_parts) - n_parts
    part_no = np.arange(parts.size) - unit_of_block[pblock] + 1
    u, v = row_frames(bearing[pblock])
    rs_u, ps_u = rs[pblock], ps[pblock]
    xy, ring, owner = _ring_vertices(parts)
    vunit = owner[ring]
    pu, pv = frame_coordinates(xy, u[vunit], v[vunit])
    first, count = row_span(pv, vunit, parts.size, rs_u)
    unit, row, start, end = row_pieces(pu, pv, ring, first, rs_u, count, unit=vunit)
    length, plants, first_plant, offset, across = plant_layout(unit, row, start, end, first, rs_u, ps_u)
    full = (unit, row, start, length, plants, first_plant, offset)

    if clips is not None:
        clips = _object_array(clips)
        # No clip, or a one-part block clipped by itself, keeps the whole block; a multi-part
        # block clipped by itself is cut part by part against its whole outline, as the
        # per-part model always did (same plants and numbers).
        none = np.fromiter((c is None for c in clips), bool, nb)
        itself = np.fromiter((c is g for c, g in zip(clips, geoms, strict=True)), bool, nb)
        clipped_block = ~(none | (itself & (n_parts == 1)))
        rows = (first, rs_u, ps_u, count)
        own = itself & (n_parts > 1)
        if own.any():
            # Parts whose envelopes are apart: another part's pieces never meet a part's own
            # pieces on its row lines, so the cut keeps each piece, trimmed to its own end.
            own &= _parts_apart(parts, pblock, unit_of_block, n_parts, nb)
            at = np.flatnonzero(own[pblock[unit]])
            if at.size:
                trimmed = _cut(at, start[at], np.minimum(start[at] + length[at], end[at]), full, rows)
                if trimmed[0].size == at.size and (trimmed[0] == at).all():
                    columns = (length, plants, first_plant, offset, across, start, end)
                    for col, cut_col in zip(columns, trimmed[3:], strict=True):
                        col[at] = cut_col
                    clipped_block &= ~own
        if clipped_block.any():
            cb = np.flatnonzero(clipped_block)
            cpoly, cp_block = _polygons(clips[cb])
            cxy, cring, cowner = _ring_vertices(cpoly)
            ring_block = cb[cp_block[cowner]]  # block of each clip ring
            # Every part of a block is cut by every ring of its clip: copy the rings per part.
            copies = n_parts[ring_block]
            ring_id = np.repeat(np.arange(ring_block.size), copies)
            ring_unit = unit_of_block[ring_block[ring_id]] + _ranges(np.zeros_like(copies), copies)
            r_start = np.searchsorted(cring, np.arange(ring_block.size), side="left")
            r_count = np.searchsorted(cring, np.arange(ring_block.size), side="right") - r_start
            take = _ranges(r_start[ring_id], r_count[ring_id])
            copy_of_vertex = np.repeat(np.arange(ring_id.size), r_count[ring_id])
            cunit = ring_unit[copy_of_vertex]
            cu, cv = frame_coordinates(cxy[take], u[cunit], v[cunit])
            c_unit, c_row, c_start, c_end = row_pieces(cu, cv, copy_of_vertex, first, rs_u, count, unit=cunit)
            keep_whole = ~clipped_block[pblock[unit]]
            (unit, row, length, plants, first_plant, offset, across, start, end) = _clip_intervals(
                (*full, across, end),
                keep_whole,
                (c_unit, c_row, c_start, c_end),
                rows,
            )

    segments = RowSegments(
        row=row + 1,
        length=length,
        plants=plants,
        first_plant=first_plant,
        offset=offset,
        plant_spacing=ps_u[unit],
        part=part_no[unit],
        pieces=StraightPieces(across=across, start=start, end=end, unit=unit, u=u, v=v),
    )
    return segments, pblock[unit]


def _parts_apart(parts, pblock, unit_of_block, n_parts, nb) -> np.ndarray:
    """Per block: whether the envelopes of its parts are pairwise apart (no overlap, no touch)."""
    lo_x, lo_y, hi_x, hi_y = shapely.bounds(parts).T
    # Every pair (i, j > i) of parts of the same block.
    later = n_parts[pblock] - (np.arange(parts.size) - unit_of_block[pblock]) - 1
    i = np.repeat(np.arange(parts.size), later)
    j = i + 1 + _ranges(np.zeros_like(later), later)
    apart = (hi_x[i] < lo_x[j]) | (hi_x[j] < lo_x[i]) | (hi_y[i] < lo_y[j]) | (hi_y[j] < lo_y[i])
    return np.bincount(pblock[i], weights=~apart, minlength=nb) == 0


def _cut(parent, lo_u, hi_u, full, rows):
    """The part ``lo_u .. hi_u`` (along the row) of pieces ``parent``: pieces kept if longer than
    :data:`LEN_TOL`, with the parent's plants that fall inside, at their unclipped positions
    and numbers.

    Returns the kept parents and the cut pieces' unit, row, length, plants, first plant,
    offset, row line offset ``across`` and ``u`` range.
    """
    unit, row, start, length, plants, first_plant, offset = full
    first, rs, ps_u, count = rows
    keep = hi_u - lo_u > LEN_TOL
    parent, lo_u, hi_u = parent[keep], lo_u[keep], hi_u[keep]
    a0 = start[parent]
    lo, hi = lo_u - a0, hi_u - a0
    off = offset[parent]
    pu = unit[parent]
    ps = ps_u[pu]
    # Plant k of the parent sits at off + k * ps; keep those with lo <= position <= hi.
    k0 = np.maximum(np.ceil((lo - off) / ps - 1e-9), 0).astype(np.int64)
    k1 = np.minimum(np.floor((hi - off) / ps + 1e-9), plants[parent] - 1).astype(np.int64)
    prow = row[parent]
    return (
        parent,
        pu,
        prow,
        hi_u - lo_u,
        np.maximum(k1 - k0 + 1, 0),
        first_plant[parent] + k0,
        off + k0 * ps - lo,
        first[pu] + prow * rs[pu],
        lo_u,
        hi_u,
    )


def _clip_intervals(full, keep_whole, clip, rows):
    """Keep the parts of the full pieces inside the clip pieces of the same row line.

    Plants keep the positions and numbers of the unclipped model; a clipped
    piece holds the plants of its parent piece that fall inside it. Pieces with
    ``keep_whole`` are kept as they are. ``full`` is each piece's unit, row,
    start, length, plants, first plant, offset, row line offset and end;
    ``rows`` is, per unit, the first row's offset, row spacing, plant spacing
    and row count.

    Returns the pieces' unit, row, length, plants, first plant, offset, row line
    offset, start and end.
    """
    unit, row, start, length, plants, first_plant, offset, across, end = full
    c_unit, c_row, c_start, c_end = clip
    first, rs, ps_u, count = rows
    row_base = np.cumsum(count) - count
    line = row_base[unit] + row
    c_line = row_base[c_unit] + c_row
    # Pair every cut piece with every clip piece of its row line (both sorted by line).
    to_cut = np.flatnonzero(~keep_whole)
    lo_i = np.searchsorted(c_line, line[to_cut], side="left")
    n_pair = np.searchsorted(c_line, line[to_cut], side="right") - lo_i
    parent = np.repeat(to_cut, n_pair)
    piece = _ranges(lo_i, n_pair)
    a0 = start[parent]
    lo_u = np.maximum(a0, c_start[piece])
    hi_u = np.minimum(a0 + length[parent], c_end[piece])
    parent, *cut = _cut(parent, lo_u, hi_u, full[:7], rows)
    kept = (unit, row, length, plants, first_plant, offset, across, start, end)
    # Back in piece order (by parent, then along the row): a parent kept whole takes one slot,
    # a cut one as many as its pieces; parents are sorted, so each piece's slot is an offset.
    slots = np.where(keep_whole, 1, np.bincount(parent, minlength=line.size))
    base = np.cumsum(slots) - slots
    at_cut = base[parent] + np.arange(parent.size) - np.searchsorted(parent, parent, side="left")
    # Boolean masks copy the (many) whole pieces several times faster than index arrays.
    is_whole = np.ones(int(slots.sum()), dtype=bool)
    is_whole[at_cut] = False
    out = []
    for full_col, cut_col in zip(kept, cut, strict=True):
        col = np.empty(is_whole.size, dtype=full_col.dtype)
        col[is_whole] = full_col[keep_whole]
        col[at_cut] = cut_col
        out.append(col)
    return tuple(out)


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
    rows + crossings). :func:`block_row_segments` does the same for many blocks.

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
    segments, _ = block_row_segments(
        [polygon],
        row_spacing_m=rs,
        plant_spacing_m=ps,
        row_bearing_deg=float(row_bearing_deg),
        clips=None if clip is None else [clip],
    )
    multi = shapely.get_type_id(polygon) == 6 and shapely.get_num_geometries(polygon) > 1
    return replace(segments, plant_spacing=ps, part=segments.part if multi else None)


def _line_segments(row_lines: np.ndarray, key: np.ndarray, clips: np.ndarray, ps: np.ndarray):
    """Clip row lines, orient and order the pieces, count plants.

    ``key`` numbers the lines (sorted, one per line and block); ``clips`` (or
    None: no clipping) and ``ps`` are per line. Returns the pieces' line index and their fields.
    """
    pieces = row_lines if clips is None else shapely.intersection(row_lines, clips)
    pieces = shapely.line_merge(pieces)
    parts, which = shapely.get_parts(pieces, return_index=True)
    keep = (shapely.get_type_id(parts) == 1) & (shapely.length(parts) > LEN_TOL)
    parts, which = parts[keep], which[keep]
    start = shapely.get_point(parts, 0)
    end = shapely.get_point(parts, -1)
    host = row_lines[which]
    at_start = shapely.line_locate_point(host, start)
    at_end = shapely.line_locate_point(host, end)
    flip = at_end < at_start
    parts = np.where(flip, shapely.reverse(parts), parts)
    along = np.minimum(at_start, at_end)
    order = np.lexsort((along, key[which]))
    parts, which = parts[order], which[order]
    length = shapely.length(parts)
    step = ps[which]
    plants = np.floor(length / step + 1e-9).astype(np.int64)
    offset = (length - plants * step) / 2.0 + step / 2.0
    # Plants of earlier segments of the same row, for numbering along the row.
    before = np.cumsum(plants) - plants
    starts = group_starts(which)
    row_base = np.repeat(before[starts], np.diff(np.append(starts, which.size)))
    return which, parts, length, plants, before - row_base + 1, offset


def _check_lines(arr: np.ndarray) -> None:
    bad = np.flatnonzero(shapely.get_type_id(arr) != 1)
    if bad.size:
        raise DesignError(
            f"row {int(bad[0]) + 1} in the rows file is not a LineString; give one line per row"
        )


def block_rows_from_lines(
    lines: ArrayLike,
    geoms,
    *,
    plant_spacing_m,
    clips=None,
) -> tuple[RowSegments, np.ndarray]:
    """Mapped rows of many blocks at once: :func:`rows_from_lines` per block.

    Each block takes the lines that intersect it, numbered 1, 2, ... in the
    lines' order, clipped to the block's ``clips`` entry (default the block).

    Returns
    -------
    segments : RowSegments
        Segments of all blocks, block by block in input order (per-segment plant spacing).
    block : numpy.ndarray
        Index of each segment's block in ``geoms``.
    """
    arr = _object_array(lines)
    _check_lines(arr)
    geoms = _object_array(geoms)
    ps = np.broadcast_to(np.asarray(plant_spacing_m, dtype=float), (geoms.size,))
    _check_all_positive(ps, "plant spacing")
    clips = geoms if clips is None else _object_array(clips)
    block, line = shapely.STRtree(arr).query(geoms, predicate="intersects")
    order = np.lexsort((line, block))
    block, line = block[order], line[order]
    # Row number of a line in a block: its rank among the lines crossing that block.
    rank = np.arange(block.size) - np.searchsorted(block, block, side="left")
    which, parts, length, plants, first_plant, offset = _line_segments(
        arr[line], np.arange(block.size), clips[block], ps[block]
    )
    segments = RowSegments(
        row=rank[which].astype(np.int64) + 1,
        lines=parts,
        length=length,
        plants=plants,
        first_plant=first_plant,
        offset=offset,
        plant_spacing=ps[block[which]],
    )
    return segments, block[which]


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
        ends=np.concatenate([p.ends_at(slice(None)) for p in parts]) if straight else None,
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
    arr = _object_array(lines)
    if arr.size == 0:
        raise DesignError("the rows file holds no row lines")
    _check_lines(arr)
    clips = None if polygon is None else _object_array([polygon] * arr.size)
    which, parts, length, plants, first_plant, offset = _line_segments(
        arr, np.arange(arr.size), clips, np.full(arr.size, ps)
    )
    return RowSegments(
        row=which.astype(np.int64) + 1,
        lines=parts,
        length=length,
        plants=plants,
        first_plant=first_plant,
        offset=offset,
        plant_spacing=ps,
    )


def eligible_plants(
    segments: RowSegments,
    *,
    skip_row_ends: int = 0,
    skip_border_rows: int = 0,
    groups: np.ndarray | None = None,
) -> np.ndarray:
    """Plants per segment that may be drawn after the end and border exclusions.

    ``groups`` numbers the row models the segments belong to (sorted), each with
    its own border rows: by default the parts of one block; for the segments of
    many blocks, one number per block and part.
    """
    if skip_row_ends < 0 or skip_border_rows < 0:
        raise OptionError("plants or rows to skip must be zero or more")
    count = np.maximum(segments.plants - 2 * int(skip_row_ends), 0)
    if skip_border_rows:
        # Rows are numbered per block (per part of a multi-part block, each with its own
        # border rows); after concat_segments, border rows are taken over the joined
        # numbering, so skip border rows block by block before joining.
        group = segments.parts if groups is None else np.asarray(groups, dtype=np.int64)
        key = group * (int(segments.row.max(initial=0)) + 1) + segments.row
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
    return more_ranks(np.empty(0, dtype=np.int64), total, n, rng=rng)


def more_ranks(out: np.ndarray, total: int, n: int, *, rng: np.random.Generator) -> np.ndarray:
    """Continue :func:`sample_ranks` from the distinct ranks ``out`` drawn so far (fewer than ``n``)."""
    while out.size < n:
        need = n - out.size
        draw = rng.integers(0, total, size=need + need // 8 + 8, dtype=np.int64)
        out = first_distinct(np.concatenate([out, draw]), n)
    return out


def sample_ranks_many(totals, ns, rngs: list[np.random.Generator]) -> tuple[np.ndarray, np.ndarray]:
    """:func:`sample_ranks` for many populations, each from its own generator, in one pass.

    Each generator is called exactly as :func:`sample_ranks` calls it, so population ``j``
    gets the same ranks as ``sample_ranks(totals[j], ns[j], rng=rngs[j])``; only the
    generator calls run population by population, the rest is done for all at once.

    Returns
    -------
    ranks : numpy.ndarray
        Ranks of population 0 (in draw order), then population 1, ...
    which : numpy.ndarray
        Population of each rank.
    """
    totals = np.asarray(totals, dtype=np.int64)
    ns = np.asarray(ns, dtype=np.int64)
    if ((ns < 0) | (ns > totals)).any():
        j = int(np.flatnonzero((ns < 0) | (ns > totals))[0])
        raise DesignError(f"cannot draw {ns[j]} distinct plants from {totals[j]}")
    whole = 2 * ns >= totals
    draws = [
        rng.permutation(int(t))[: int(n)]
        if w
        else rng.integers(0, int(t), size=int(n + n // 8 + 8), dtype=np.int64)
        for rng, t, n, w in zip(rngs, totals.tolist(), ns.tolist(), whole.tolist(), strict=True)
    ]
    size = np.array([d.size for d in draws], dtype=np.int64)
    which = np.repeat(np.arange(ns.size), size)
    value = np.concatenate(draws) if draws else np.zeros(0, dtype=np.int64)
    # First occurrence of each (population, rank): offset each population's ranks past the others'.
    key = (np.cumsum(totals) - totals)[which] + value
    _, first = np.unique(key, return_index=True)
    first_seen = np.zeros(key.size, dtype=bool)
    first_seen[first] = True
    seen = np.cumsum(first_seen)
    before = np.r_[0, seen][np.cumsum(size) - size]  # distinct ranks of earlier populations
    take = first_seen & (seen - 1 - before[which] < ns[which])
    got = np.bincount(which[take], minlength=ns.size)
    short = np.flatnonzero(got < ns)
    if not short.size:
        return value[take], which[take]
    # Rare: repeats used up a batch's margin; those populations draw on as sample_ranks does.
    chosen = np.split(value[take], np.cumsum(got)[:-1])
    for j in short.tolist():
        chosen[j] = more_ranks(chosen[j], int(totals[j]), int(ns[j]), rng=rngs[j])
    return np.concatenate(chosen), np.repeat(np.arange(ns.size), ns)


def _plant_xy(segments, seg: np.ndarray, within: np.ndarray) -> np.ndarray:
    """Coordinates ``(n, 2)`` of plant ``within`` (counted from the segment's first plant) of
    each segment ``seg``."""
    spacing = np.asarray(segments.plant_spacing, dtype=float)
    dist = segments.offset[seg] + within * (spacing if spacing.ndim == 0 else spacing[seg])
    if segments.lines is None:
        # Straight segments: the plant is a linear interpolation of the ends.
        return straight_points(dist, segments.ends_at(seg), segments.length[seg])
    return shapely.get_coordinates(shapely.line_interpolate_point(segments.lines_at(seg), dist)).reshape(
        -1, 2
    )


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
    xy = _plant_xy(segments, seg, within)
    return PlantPicks(
        row=segments.row[seg],
        plant=segments.first_plant[seg] + within,
        x=xy[:, 0],
        y=xy[:, 1],
        segment=seg,
        eligible=total,
        part=segments.parts[seg],
    )


def pick_plants_many(
    segments: RowSegments,
    population: np.ndarray,
    ns,
    rngs: list[np.random.Generator],
    *,
    eligible: np.ndarray,
    skip_row_ends: int = 0,
    order: np.ndarray | None = None,
) -> tuple[PlantPicks, np.ndarray]:
    """:func:`pick_plants` for many populations (blocks or strata) at once.

    Population ``j`` gets the plants ``pick_plants`` would draw from its segments
    with ``rngs[j]``; only the generator calls run population by population.

    Parameters
    ----------
    segments : RowSegments
        Segments of all populations, population by population (``population`` sorted),
        or in any order if ``order`` is given.
    population : numpy.ndarray
        Population (0, 1, ...) of each segment (of each entry of ``order`` if given).
    ns : array_like of int
        Plants to draw from each population (at most its eligible plants).
    rngs : list of numpy.random.Generator
        One per population.
    eligible : numpy.ndarray
        Eligible plants per segment (:func:`eligible_plants`, row models grouped as drawn).
    skip_row_ends : int
        Plants excluded at each end of every segment (as used for ``eligible``).
    order : numpy.ndarray, optional
        Indices of the segments to draw from, population by population (e.g. blocks
        grouped by stratum); ``eligible`` stays aligned with ``segments``.

    Returns
    -------
    picks : PlantPicks
        Population 0's picks in draw order, then population 1's, ...; ``eligible`` is the
        total; ``segment`` indexes ``segments``.
    which : numpy.ndarray
        Population of each pick.
    """
    ns = np.asarray(ns, dtype=np.int64)
    eligible = np.asarray(eligible, dtype=np.int64)
    if order is not None:
        eligible = eligible[order]
    totals = np.bincount(population, weights=eligible, minlength=ns.size).astype(np.int64)
    ranks, which = sample_ranks_many(totals, ns, rngs)
    # Ranks of population j follow those of the populations before it in the joined ranking.
    seg, within = locate_ranks(eligible, (np.cumsum(totals) - totals)[which] + ranks, int(skip_row_ends))
    if order is not None:
        seg = order[seg]
    xy = _plant_xy(segments, seg, within)
    picks = PlantPicks(
        row=segments.row[seg],
        plant=segments.first_plant[seg] + within,
        x=xy[:, 0],
        y=xy[:, 1],
        segment=seg,
        eligible=int(totals.sum()),
        part=segments.parts[seg],
    )
    return picks, which


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
