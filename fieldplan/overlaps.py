"""Blocks that overlap each other: found before planning, refused or resolved on request.

Two blocks drawn over the same ground would have the overlap sampled twice and
counted twice in every area weight (a stratified estimate weights each block by
its area). Overlaps larger than a digitising sliver are therefore refused,
naming the pair and the area; ``--overlaps first`` keeps the overlap in the
block listed first in the file and takes it out of the later ones.
"""

from __future__ import annotations

import numpy as np
import shapely

from fieldplan.errors import InvalidBlocksError

__all__ = ["OVERLAP_CHOICES", "SLIVER_M2", "SLIVER_SHARE", "find_overlaps", "resolve_overlaps"]

OVERLAP_CHOICES = ("refuse", "first")
#: Overlaps up to this many square metres, or up to this share of the smaller block, are
#: digitising slivers along a shared boundary (a line traced twice a few decimetres apart)
#: and are let through. A 100 m boundary traced 0.2 m apart overlaps by 20 m^2; the
#: share keeps small blocks from hiding a real overlap (common practice, no source).
SLIVER_M2 = 25.0
SLIVER_SHARE = 0.001


def find_overlaps(geoms) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Pairs of blocks whose interiors overlap, with the overlap area.

    Parameters
    ----------
    geoms : array of polygons in a metric CRS

    Returns
    -------
    (i, j, area) : numpy arrays
        ``i < j`` index pairs and the area of their intersection (m^2), largest first.
    """
    geoms = np.asarray(geoms, dtype=object)
    tree = shapely.STRtree(geoms)
    # Interiors meet when blocks overlap or one lies inside the other; blocks that only share
    # an edge (the usual case) are not intersected at all.
    # Pairs whose bounding boxes meet, each once (i < j); the predicates then run on those pairs
    # only, never on a block against itself (which is most of the work of a predicate query).
    left, right = tree.query(geoms)
    keep = left < right
    left, right = left[keep], right[keep]
    if left.size:
        a, b = geoms[left], geoms[right]
        meet = shapely.overlaps(a, b) | shapely.contains(a, b) | shapely.within(a, b)
        left, right = left[meet], right[meet]
        order = np.lexsort((right, left))
        left, right = left[order], right[order]
    if left.size == 0:
        return left, right, np.zeros(0)
    area = shapely.area(shapely.intersection(geoms[left], geoms[right]))
    order = np.argsort(-area, kind="stable")
    touching = area[order] > 0.0
    return left[order][touching], right[order][touching], area[order][touching]


def _ha(m2: float) -> str:
    return f"{m2 / 10_000:,.2f} ha ({m2:,.0f} m²)" if m2 >= 10_000 else f"{m2:,.0f} m²"


def resolve_overlaps(geoms, ids, path, *, mode: str = "refuse") -> tuple[np.ndarray, list[str]]:
    """Refuse overlapping blocks, or give each overlap to the block listed first.

    Parameters
    ----------
    geoms : array of polygons in a metric CRS, in file order
    ids : sequence of block ids, same order
    path : file name for messages
    mode : {"refuse", "first"}

    Returns
    -------
    (numpy.ndarray, list of str)
        The geometries (clipped with ``first``) and notes saying what was clipped.

    Raises
    ------
    fieldplan.errors.InvalidBlocksError
        With ``refuse``: for the largest overlap beyond a sliver, naming both blocks and the area.
    """
    if mode not in OVERLAP_CHOICES:
        raise InvalidBlocksError(f"--overlaps must be one of {', '.join(OVERLAP_CHOICES)}; got {mode!r}")
    geoms = np.asarray(geoms, dtype=object)
    i, j, area = find_overlaps(geoms)
    if i.size == 0:
        return geoms, []
    smaller = np.minimum(shapely.area(geoms[i]), shapely.area(geoms[j]))
    real = area > np.maximum(SLIVER_M2, SLIVER_SHARE * smaller)
    if mode == "refuse":
        if real.any():
            k = int(np.flatnonzero(real)[0])
            more = int(real.sum()) - 1
            raise InvalidBlocksError(
                f"{path}: blocks {ids[i[k]]!r} and {ids[j[k]]!r} overlap by {_ha(float(area[k]))}"
                + (f" (and {more} more pair{'s' if more > 1 else ''})" if more else "")
                + "; the overlap would be sampled and counted twice: redraw the boundaries, or pass "
                "--overlaps first to leave each overlap in the block listed first in the file"
            )
        return geoms, []
    out = geoms.copy()
    notes = []
    # Each later block loses what every earlier block covers (in file order).
    for later in np.unique(j):
        earlier = i[j == later]
        out[later] = shapely.difference(out[later], shapely.union_all(geoms[earlier]))
        if shapely.is_empty(out[later]) or shapely.area(out[later]) <= 0.0:
            raise InvalidBlocksError(
                f"{path}: block {ids[later]!r} lies wholly inside {ids[earlier[0]]!r}; with --overlaps "
                "first nothing of it is left: remove it from the file or give it its own ground"
            )
        lost = float(shapely.area(geoms[later]) - shapely.area(out[later]))
        names = ", ".join(repr(ids[e]) for e in earlier[:3]) + (" ..." if earlier.size > 3 else "")
        notes.append(f"{path}: block {ids[later]!r} overlapped {names}; {_ha(lost)} left to the earlier block(s)")
    return out, notes
